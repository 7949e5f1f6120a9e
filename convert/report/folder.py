"""Write a report folder atomically: everything goes into a temporary folder beside the
destination, which is renamed into place at the end. An existing folder is replaced only
with ``force``, and never when the case file or its inputs live inside it."""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

from convert.errors import InputError


def check_destination(out_dir: Path, *, force: bool, protected: list[Path]) -> None:
    """Refuse a destination that exists (without ``force``) or that holds a protected input."""
    out = out_dir.resolve()
    for p in protected:
        rp = Path(p).resolve()
        if rp == out or out in rp.parents:
            raise InputError(f"the report folder {str(out_dir)!r} contains the input {str(p)!r}; choose another "
                             "folder with --out", where="--out")
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"{str(out_dir)!r} exists and is not a folder; choose a folder name with --out",
                         where="--out")
    if out_dir.exists() and not force:
        raise InputError(f"the report folder {str(out_dir)!r} already exists; rerun with --force to replace it, or "
                         "choose another folder with --out", where="--out")


def write_folder(out_dir: Path, files: dict[str, bytes | str], *, force: bool, protected: list[Path]) -> Path:
    """Write ``files`` (relative path -> content) as the folder ``out_dir``; return its path."""
    out_dir = Path(out_dir)
    check_destination(out_dir, force=force, protected=protected)
    parent = out_dir.resolve().parent
    parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", suffix=".tmp", dir=parent))
    try:
        for rel, content in files.items():
            path = tmp / rel
            path.parent.mkdir(parents=True, exist_ok=True)
            if isinstance(content, str):
                path.write_text(content, encoding="utf-8")
            else:
                path.write_bytes(content)
        os.chmod(tmp, 0o755)
        if out_dir.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", suffix=".old", dir=parent))
            os.rmdir(old)
            os.rename(out_dir, old)
            os.rename(tmp, out_dir)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.rename(tmp, out_dir)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out_dir
