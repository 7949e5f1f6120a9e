"""Issue 9 item 1: folders and files the tool did not make are never removed or replaced.

`report --force` deleted any folder it was given (a thesis and its sub-folder; `--out ../inner`
from inside `inner`); `circuit --netlist /dev/null --force` replaced the device node with a
regular file; `circuit` on a nearly full disk wrote two of three files. Each defect is a test
here with the exact input (common practice: regression tests named after the bug).
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

import pytest

from convert.errors import InputError
from convert.report.folder import MARKER, check_destination, write_folder

ROOT = Path(__file__).resolve().parents[1]
CASE = ROOT / "cases" / "slow_firmware_fails.toml"  # digital only: a quick report
PI = "2*(1 + 1/(0.3*s))"


@pytest.fixture
def here(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    return tmp_path


def _tree(folder: Path) -> dict[str, bytes]:
    return {
        str(p.relative_to(folder)): (p.read_bytes() if p.is_file() else b"<dir>") for p in sorted(folder.rglob("*"))
    }


def _error(result, *fragments):
    lines = [line for line in result.err.splitlines() if line.strip()]
    assert result.code == 2 and len(lines) == 1, (result.code, result.err)
    for f in fragments:
        assert f in lines[0], lines[0]
    return lines[0]


# ----------------------------------------------------------------------------- report folders
def test_force_refuses_a_folder_of_user_files(run_cli, here):
    """`--out userdocs --force` deleted a thesis and its sub-folder."""
    docs = here / "userdocs"
    (docs / "chapter1").mkdir(parents=True)
    (docs / "thesis.tex").write_text("my thesis")
    (docs / "chapter1" / "intro.tex").write_text("intro")
    before = _tree(docs)
    line = _error(run_cli("report", str(CASE), "--out", "userdocs", "--force"), "--out", MARKER, "thesis.tex")
    assert "chapter1" in line
    assert _tree(docs) == before


def test_force_refuses_the_folder_the_user_is_in(run_cli, here, monkeypatch):
    """`--out ../inner --force` from inside `inner` wiped the user's files."""
    inner = here / "inner"
    inner.mkdir()
    (inner / "notes.txt").write_text("keep me")
    monkeypatch.chdir(inner)
    _error(run_cli("report", str(CASE), "--out", "../inner", "--force"), "the folder you are working in")
    assert (inner / "notes.txt").read_text() == "keep me"


def test_force_on_an_empty_folder_writes_the_report_with_its_marker(run_cli, here):
    (here / "empty").mkdir()
    result = run_cli("report", str(CASE), "--out", "empty", "--force")
    assert result.code in (0, 1), result.err
    listed = (here / "empty" / MARKER).read_text().splitlines()[1:]
    on_disk = sorted(str(p.relative_to(here / "empty")) for p in (here / "empty").rglob("*") if p.is_file())
    assert sorted(listed) == on_disk  # the marker lists exactly what was written


def test_force_replaces_an_earlier_report_but_not_one_with_user_files_added(run_cli, here):
    first = run_cli("report", str(CASE), "--out", "rep")
    assert first.code in (0, 1), first.err
    again = run_cli("report", str(CASE), "--out", "rep", "--force")
    assert again.code == first.code, again.err
    (here / "rep" / "my-notes.txt").write_text("signed off by ...")
    before = _tree(here / "rep")
    _error(run_cli("report", str(CASE), "--out", "rep", "--force"), "my-notes.txt", "did not write")
    assert _tree(here / "rep") == before


def test_a_report_folder_that_is_a_link_is_resolved_and_stated(run_cli, here):
    (here / "real").mkdir()
    os.symlink("real", here / "link")
    result = run_cli("report", str(CASE), "--out", "link", "--force")
    assert result.code in (0, 1), result.err
    assert "is a link; the report goes to" in result.out and str(here / "real") in result.out
    assert os.path.islink(here / "link") and (here / "real" / "report.md").is_file()


def test_dev_null_as_report_folder_is_refused(run_cli, here):
    _error(run_cli("report", str(CASE), "--out", "/dev/null", "--force"), "not a folder")
    assert stat.S_ISCHR(os.stat("/dev/null").st_mode)


def test_marker_without_the_header_is_not_a_marker(here):
    """A file named like the marker but not written by the tool does not unlock --force."""
    (here / "f").mkdir()
    (here / "f" / MARKER).write_text("report.md\n")
    (here / "f" / "report.md").write_text("mine")
    with pytest.raises(InputError, match="has no .loopshift-report marker"):
        check_destination(here / "f", force=True, protected=[])


def test_a_link_inside_an_earlier_report_is_refused_unless_listed(here):
    write_folder(here / "r", {"report.md": "x"}, force=False, protected=[])
    (here / "outside.txt").write_text("precious")
    os.symlink(here / "outside.txt", here / "r" / "extra")
    with pytest.raises(InputError, match="'extra'"):
        check_destination(here / "r", force=True, protected=[])
    os.unlink(here / "r" / "extra")
    os.unlink(here / "r" / "report.md")
    os.symlink(here / "outside.txt", here / "r" / "report.md")  # a listed name, now a link: only the link goes
    write_folder(here / "r", {"report.md": "new"}, force=True, protected=[])
    assert (here / "outside.txt").read_text() == "precious"
    assert (here / "r" / "report.md").read_text() == "new"


# ----------------------------------------------------------------------------- circuit outputs
def test_netlist_to_dev_null_with_force_is_refused(run_cli, here):
    """`circuit --netlist /dev/null --force` (as root) replaced the device node with a file."""
    _error(run_cli("circuit", PI, "--netlist", "/dev/null", "--force", "--draws", "0"), "--netlist", "character device")
    assert stat.S_ISCHR(os.stat("/dev/null").st_mode)


def test_netlist_to_a_fifo_is_refused(run_cli, here):
    os.mkfifo(here / "pipe.cir")
    _error(run_cli("circuit", PI, "--netlist", "pipe.cir", "--force", "--draws", "0"), "named pipe")
    assert stat.S_ISFIFO(os.stat(here / "pipe.cir").st_mode)


def test_netlist_through_a_link_writes_the_target_and_says_so(run_cli, here):
    (here / "boards").mkdir()
    (here / "boards" / "pi.cir").write_text("old\n")
    os.symlink("boards/pi.cir", here / "pi.cir")
    result = run_cli("circuit", PI, "--netlist", "pi.cir", "--force", "--draws", "0")
    assert result.code == 0, result.err
    assert "is a link; writing to" in result.out
    assert os.path.islink(here / "pi.cir")
    assert (here / "boards" / "pi.cir").read_text().startswith("*")


def test_three_outputs_are_written_all_or_none(run_cli, here, monkeypatch):
    """On a nearly full disk `circuit` wrote two of three files and named no option. Now the
    failure of the third leaves the earlier two untouched (new ones absent, old ones unchanged)."""
    import convert.report.schematic as schematic

    def full_disk(design, path):
        raise OSError(28, "No space left on device", path)

    monkeypatch.setattr(schematic, "design_schematic", full_disk)
    argv = [
        "circuit",
        PI,
        "--netlist",
        "pi.cir",
        "--bom",
        "pi.csv",
        "--buy-list",
        "buy.json",
        "--schematic",
        "pi.svg",
        "--draws",
        "0",
    ]
    _error(run_cli(*argv), "--schematic", "No space left on device", "nothing was written")
    assert sorted(os.listdir(here)) == []
    names = ("pi.cir", "pi.csv", "buy.json", "pi.svg")
    for name in names:
        (here / name).write_text("earlier " + name)
    _error(run_cli(*argv, "--force"), "--schematic", "nothing was written")
    assert {p.name: p.read_text() for p in here.iterdir()} == {n: "earlier " + n for n in names}


def test_a_failing_rename_puts_the_earlier_files_back(run_cli, here, monkeypatch):
    """All or none also when the last step (renaming into place) fails half way."""
    for name in ("pi.cir", "pi.csv"):
        (here / name).write_text("earlier " + name)
    real_replace = os.replace
    calls = []

    def second_fails(src, dst):
        calls.append(dst)
        if len(calls) == 2 and str(dst).endswith("pi.csv"):
            raise OSError(5, "Input/output error", dst)
        return real_replace(src, dst)

    monkeypatch.setattr(os, "replace", second_fails)
    _error(
        run_cli("circuit", PI, "--netlist", "pi.cir", "--bom", "pi.csv", "--force", "--draws", "0"),
        "--bom",
        "nothing was written",
    )
    assert {p.name: p.read_text() for p in here.iterdir()} == {n: "earlier " + n for n in ("pi.cir", "pi.csv")}
