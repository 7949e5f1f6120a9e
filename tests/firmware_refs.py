"""Reference outputs from scipy.signal for a structure's layout (shared by the firmware tests)."""

from __future__ import annotations


def scipy_filter(layout, x):
    """scipy.signal.lfilter on b/a for the direct forms, sosfilt on the z-domain sections
    otherwise (δ-sections mapped back through their roots)."""
    from scipy.signal import lfilter, sosfilt

    from convert.digital.fixedpoint import sos_rows

    if layout.structure in ("direct1", "direct2t"):
        return lfilter(layout.sections[0].b, layout.sections[0].a, x)
    return sosfilt(sos_rows(layout), x)


def compile_c(tmp_path, files: dict, name: str, main: str):
    """Write ``files`` and ``main.c`` into ``tmp_path`` and compile them with
    ``gcc -std=c99 -Wall -Wextra -Werror -pedantic -O2``; returns the executable's path."""
    import shutil
    import subprocess

    for n, text in files.items():
        (tmp_path / n).write_text(text)
    (tmp_path / "main.c").write_text(main)
    exe = tmp_path / "run"
    flags = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-O2"]
    subprocess.run(
        [shutil.which("gcc"), *flags, "-o", str(exe), str(tmp_path / "main.c"), str(tmp_path / f"{name}.c")],
        check=True,
        capture_output=True,
        text=True,
    )
    return exe
