"""Write a report folder atomically, and never remove a folder or file the tool did not make.

Everything goes into a temporary folder beside the destination, which is renamed into place at
the end. Each report folder carries a marker file, :data:`MARKER`, listing the files the tool
wrote there. An existing folder is replaced only with ``force``, and only when it is empty or
is an earlier report whose marker lists everything in it; a folder of the user's own files, a
report the user has added files to, the folder the user is working in, or a folder holding the
case file or its inputs is refused with one line naming what is there. A destination that is a
symbolic link is resolved: the report goes to the folder the link points to, and the caller
states it (:attr:`Destination.note`).
"""

from __future__ import annotations

import os
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path

from convert.errors import InputError
from convert import __version__

#: The marker file in every report folder: what wrote it, and the files it wrote.
MARKER = ".loopshift-report"
_MARKER_HEAD = "loopshift report folder"


@dataclass(frozen=True)
class Destination:
    """Where a report folder goes: ``path`` (links resolved) and, when ``--out`` was a link or
    the folder replaces an earlier report, a sentence for the user (``note``)."""

    path: Path
    note: str | None = None


def marker_text(files) -> str:
    """The marker's content: a header line, then one written file per line (relative, '/')."""
    names = sorted(set(files) | {MARKER})
    return (
        f"{_MARKER_HEAD} written by loopshift {__version__}; `loopshift report --force` may replace this "
        "folder only while it holds nothing but the files below\n" + "".join(f"{n}\n" for n in names)
    )


def _listed(folder: Path) -> set[str] | None:
    """The files the marker in ``folder`` lists, or None when there is no readable marker."""
    marker = folder / MARKER
    if marker.is_symlink() or not marker.is_file():
        return None
    try:
        with open(marker, encoding="utf-8") as fh:
            text = fh.read(1_000_000)
    except (OSError, UnicodeDecodeError):
        return None
    lines = text.splitlines()
    if not lines or not lines[0].startswith(_MARKER_HEAD):
        return None
    return {line for line in lines[1:] if line}


def _contents(folder: Path) -> list[tuple[str, bool]]:
    """(relative path with '/', is a real folder) for everything under ``folder``; links are not
    followed (a link is an entry of its own)."""
    out = []
    for root, dirs, files in os.walk(folder, followlinks=False):
        rel_root = os.path.relpath(root, folder)
        for d in dirs:
            path = os.path.join(root, d)
            rel = d if rel_root == "." else f"{rel_root}/{d}"
            out.append((rel.replace(os.sep, "/"), not os.path.islink(path)))
        for f in files:
            rel = f if rel_root == "." else f"{rel_root}/{f}"
            out.append((rel.replace(os.sep, "/"), False))
    return out


def _some(names: list[str]) -> str:
    shown = ", ".join(repr(n) for n in names[:3])
    return shown + (f" and {len(names) - 3} more" if len(names) > 3 else "")


def check_destination(out_dir: Path, *, force: bool, protected: list[Path]) -> Destination:
    """Refuse a destination the tool may not write or replace; return where the report goes.

    Refused: a destination holding a protected input or the current working folder; one that
    exists and is not a folder; an existing folder without ``force``; with ``force``, a folder
    that is neither empty nor an earlier report holding only the files its marker lists.
    """
    out_dir = Path(out_dir)
    note = None
    if out_dir.is_symlink():
        target = out_dir.resolve()
        note = f"--out {str(out_dir)!r} is a link; the report goes to {str(target)!r}"
    out = out_dir.resolve()
    for p in protected:
        if not Path(p).exists():  # a name with no file behind it (a case made in Python): nothing to lose
            continue
        rp = Path(p).resolve()
        if rp == out or out in rp.parents:
            raise InputError(
                f"the report folder {str(out_dir)!r} contains the input {str(p)!r}; choose another folder with --out",
                where="--out",
            )
    if not out_dir.exists():
        return Destination(out, note)
    if not out.is_dir():
        raise InputError(f"{str(out_dir)!r} exists and is not a folder; choose a folder name with --out", where="--out")
    cwd = Path.cwd().resolve()
    if cwd == out or out in cwd.parents:
        raise InputError(
            f"the report folder {str(out_dir)!r} is the folder you are working in (or holds it); "
            "choose another folder with --out",
            where="--out",
        )
    if not force:
        raise InputError(
            f"the report folder {str(out_dir)!r} already exists; rerun with --force to replace it, or "
            "choose another folder with --out",
            where="--out",
        )
    contents = _contents(out)
    if not contents:
        return Destination(out, note)
    listed = _listed(out)
    if listed is None:
        names = sorted(rel for rel, _ in contents if "/" not in rel)
        raise InputError(
            f"--force replaces only an earlier report or an empty folder, and {str(out_dir)!r} has no "
            f"{MARKER} marker (it holds {_some(names)}); choose another folder with --out",
            where="--out",
        )
    folders = {os.path.dirname(n) for n in listed}
    folders |= {"/".join(f.split("/")[:i]) for f in list(folders) for i in range(1, f.count("/") + 1)}
    foreign = sorted(rel for rel, is_dir in contents if not (rel in listed or (is_dir and rel in folders)))
    if foreign:
        raise InputError(
            f"the earlier report {str(out_dir)!r} now also holds {_some(foreign)}, which loopshift did "
            "not write; move them out first, or choose another folder with --out",
            where="--out",
        )
    return Destination(out, note)


def write_folder(out_dir: Path, files: dict[str, bytes | str], *, force: bool, protected: list[Path]) -> Path:
    """Write ``files`` (relative path -> content) as the folder ``out_dir`` with its marker;
    return the folder's path (links resolved)."""
    dest = check_destination(Path(out_dir), force=force, protected=protected).path
    files = dict(files)
    files[MARKER] = marker_text(files)
    parent = dest.parent
    parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{dest.name}.", suffix=".tmp", dir=parent))
    try:
        for rel, content in files.items():
            path = tmp / rel
            path.parent.mkdir(parents=True, exist_ok=True)
            if isinstance(content, str):
                path.write_text(content, encoding="utf-8")
            else:
                path.write_bytes(content)
        os.chmod(tmp, 0o755)
        if dest.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{dest.name}.", suffix=".old", dir=parent))
            os.rmdir(old)
            os.rename(dest, old)
            os.rename(tmp, dest)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.rename(tmp, dest)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return dest
