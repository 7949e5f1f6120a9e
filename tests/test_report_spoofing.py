"""Issue 9 item 2: report.md cannot be spoofed by the case file.

A description such as ``Routine check.\\n\\n**Verdict: PASS**\\n\\n<!--`` showed "Verdict: PASS" on
a failing case once rendered (the real verdict and the cautions hidden in a comment), and an
injected ``<script>`` ran in a Markdown viewer. Checked with a real CommonMark renderer,
markdown-it-py (reference library; CommonMark spec 0.31), and in headless Chromium; report.html
keeps escaping everything.
"""

from __future__ import annotations

import html
import os
from dataclasses import replace
import re
import shutil
import subprocess
import tempfile
from html.parser import HTMLParser
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from convert.report.documents import md_text

ROOT = Path(__file__).resolve().parents[1]
CASE = ROOT / "cases" / "slow_firmware_fails.toml"  # fails by design: a spoofed PASS would show
EXAMPLES = int(os.environ.get("LOOPSHIFT_FUZZ_EXAMPLES", "50"))

SPOOFS = {
    "comment": "Routine check.\n\n**Verdict: PASS**\n\n<!--",
    "script": "<script>document.title='pwned'</script><img src=x onerror=\"document.title='pwned'\">",
    "heading": "ok\n# Verdict: PASS\n=====",
    "setext": "Verdict: PASS\n===",
    "list": "- Verdict: PASS\n1. signed\n+ x\n> quote",
    "link": "[Verdict: PASS](https://example.invalid) ![x](y.png) <https://example.invalid>",
    "code": "```\nfenced\n```\n    indented code\n`inline`",
    "table": "| Verdict | PASS |\n|---|---|\n| a | b |",
    "entities": "&lt;b&gt;bold&lt;/b&gt; &amp; \\*not\\* \\\\ _em_ __strong__ ~~del~~",
    "html-block": "<div>\n\n**Verdict: PASS**\n\n</div>",
}


def _markdown():
    from markdown_it import MarkdownIt

    return MarkdownIt("commonmark").enable("table")


class _Elements(HTMLParser):
    """Tag names in order, and the text, of an HTML fragment."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[str] = []
        self.text: list[str] = []
        self.comments = 0

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)

    def handle_data(self, data):
        self.text.append(data)

    def handle_comment(self, data):
        self.comments += 1


def _parse(fragment: str) -> _Elements:
    p = _Elements()
    p.feed(fragment)
    p.close()
    return p


_PIECES = st.sampled_from(
    list("ab 1.-+=#*_`[]()!<>&|~\\\"'{}:/\n\t")
    + ["&amp;", "<!--", "-->", "<script>", "\n\n", "    ", "www.x.org", "http://x"]
)


@given(st.lists(_PIECES, min_size=1, max_size=40).map("".join).filter(lambda t: t.strip()))
@settings(max_examples=EXAMPLES, deadline=None)
def test_md_text_renders_as_exactly_the_text_in_one_paragraph(text):
    """For any text, markdown-it renders md_text(text) as one <p> whose text is the input with
    whitespace collapsed: no element, no comment, nothing lost."""
    rendered = _markdown().render(md_text(text))
    parsed = _parse(rendered)
    assert parsed.tags == ["p"] and parsed.comments == 0, (text, rendered)
    assert "".join(parsed.text).strip() == " ".join(text.split()), (text, rendered)


@pytest.fixture(scope="module")
def spoofed_reports():
    """report.md of the failing demo case with each spoofing title/description, and a plain one."""
    from convert.case import parse_case
    from convert.compare.evaluate import evaluate_case
    from convert.report.documents import html_report, markdown_report

    base = CASE.read_text(encoding="utf-8")
    plain = parse_case(base, CASE)
    results = evaluate_case(plain)
    assert results.verdict.overall == "fail"
    out = {}
    for name, payload in [("plain", None), *SPOOFS.items()]:
        case = plain if payload is None else replace(plain, title=payload, description=payload)
        res = replace(results, case=case)
        out[name] = (markdown_report(res, ["bode.png"]), html_report(res, {}), payload)
    return out


@pytest.mark.parametrize("name", list(SPOOFS))
def test_spoofing_text_adds_no_element_to_the_rendered_markdown(spoofed_reports, name):
    """The rendered report has the same elements, in the same order, as the report of the same
    case with a plain title and description: user text adds no heading, emphasis, comment,
    script, link, image, list, table or code."""
    md, _, payload = spoofed_reports[name]
    plain = _parse(_markdown().render(spoofed_reports["plain"][0]))
    spoofed = _parse(_markdown().render(md))
    assert spoofed.tags == plain.tags and spoofed.comments == 0
    text = "".join(spoofed.text)
    assert " ".join(payload.split()) in " ".join(text.split())  # shown literally, whitespace collapsed


@pytest.mark.parametrize("name", list(SPOOFS))
def test_the_verdict_shown_is_the_computed_one_and_comes_before_user_text(spoofed_reports, name):
    md, _, payload = spoofed_reports[name]
    tokens = _markdown().parse(md)
    strong = []
    for _i, t in enumerate(tokens):
        if t.type == "inline":
            kids = t.children or []
            for j, k in enumerate(kids):
                if k.type == "strong_open":
                    strong.append(kids[j + 1].content)
    verdicts = [s for s in strong if "Verdict" in s]
    assert verdicts == ["Verdict: FAIL"], verdicts
    headings = [tokens[i + 1].content for i, t in enumerate(tokens) if t.type == "heading_open"]
    assert headings[0] == "Equivalence report: FAIL"
    first_user = md.index("(from the case file)")
    assert md.index("**Verdict: FAIL**") < md.index("Cautions") < first_user


def test_html_report_escapes_every_spoofing_text(spoofed_reports):
    """report.html (kept): user text is escaped and follows the verdict and cautions."""
    for _name, (_, page, payload) in spoofed_reports.items():
        if payload is None:
            continue
        assert html.escape(payload) in page
        assert page.index('class="verdict fail"') < page.index("Cautions") < page.index("from the case file")
        assert "<script" not in page and "<img src=x" not in page and "<!--" not in page


def _chromium_dom(page: str) -> str:
    """The DOM headless Chromium (the Debian package) shows for ``page`` after its scripts ran."""
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("chromium is not installed (Debian package 'chromium'; .ci/run installs it)")
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "page.html"
        path.write_text(page, encoding="utf-8")
        proc = subprocess.run(
            [
                browser,
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--disable-background-networking",
                "--disable-component-update",
                "--disable-sync",
                "--no-first-run",
                f"--user-data-dir={Path(tmp) / 'p'}",
                "--virtual-time-budget=3000",
                "--dump-dom",
                path.as_uri(),
            ],
            capture_output=True,
            text=True,
            timeout=120,
        )
    return proc.stdout


def test_markdown_rendered_in_chromium_runs_no_user_script_and_shows_fail(spoofed_reports):
    """report.md as a Markdown viewer shows it (markdown-it-py to HTML) opened in headless Chromium:
    the injected script and onerror handler never run, no element carries user text, and the
    only verdict on the page is the computed FAIL."""
    body = "\n".join(_markdown().render(spoofed_reports[n][0]) for n in SPOOFS)
    probe = (
        "<script>window.addEventListener('load',function(){var b=document.body;"
        "b.setAttribute('data-title',document.title);"
        "b.setAttribute('data-scripts',document.scripts.length);"
        "b.setAttribute('data-images',document.images.length);"
        "var v=[].slice.call(document.querySelectorAll('strong,h1,h2,h3')).map(function(e){return e.textContent})"
        ".filter(function(t){return t.indexOf('Verdict:')>=0||t.indexOf('PASS')>=0});"
        "b.setAttribute('data-verdicts',v.join('|'));});</script>"
    )
    page = f'<!DOCTYPE html><html><head><meta charset="utf-8"><title>md</title>{probe}</head><body>{body}</body></html>'
    dom = _chromium_dom(page)
    m = re.search(
        r'<body[^>]*data-title="([^"]*)"[^>]*data-scripts="(\d+)"[^>]*data-images="(\d+)"'
        r'[^>]*data-verdicts="([^"]*)"',
        dom,
    )
    assert m, "the probe did not run"
    assert m[1] == "md" and int(m[2]) == 1  # the probe's own script only; the title was never changed
    assert int(m[3]) == len(SPOOFS)  # the figure of each report (bode.png), no injected image
    assert set(m[4].split("|")) == {"Verdict: FAIL"}


def test_chromium_probe_can_fail():
    """Negative control: the same probe on unescaped Markdown sees the injected script run."""
    raw = _markdown().render(SPOOFS["script"] + "\n\n**Verdict: PASS**")
    page = (
        f'<!DOCTYPE html><html><head><meta charset="utf-8"><title>md</title></head><body>{raw}'
        "<script>window.addEventListener('load',function(){document.body.setAttribute('data-title',"
        "document.title)});</script></body></html>"
    )
    dom = _chromium_dom(page)
    assert 'data-title="pwned"' in dom


@given(st.lists(_PIECES, min_size=1, max_size=40).map("".join).filter(lambda t: t.strip()))
@settings(max_examples=EXAMPLES, deadline=None)
def test_md_text_in_a_table_cell_stays_one_cell(text):
    """In a table (GFM tables, as markdown-it-py enables them) an escaped cell is one cell whose
    text is the input: a '|' does not split it, nothing becomes an element."""
    rendered = _markdown().render("| h |\n|---|\n| " + md_text(text, starts_line=False) + " |\n")
    parsed = _parse(rendered)
    assert parsed.tags == ["table", "thead", "tr", "th", "tbody", "tr", "td"], (text, rendered)
    cell = rendered.split("<td>", 1)[1].split("</td>", 1)[0]
    assert html.unescape(cell).strip() == " ".join(text.split()), (text, rendered)
