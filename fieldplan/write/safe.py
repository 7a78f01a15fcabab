"""Safe writing: atomic files and folders, spreadsheet-safe CSV cells, safe file names."""

from __future__ import annotations

import os
import re
import shutil
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from fieldplan.errors import OutputExistsError

__all__ = [
    "neutralise_csv_cell",
    "neutralise_frame",
    "atomic_write_bytes",
    "atomic_write_text",
    "safe_filename",
    "staged_folder",
]

# Spreadsheet programs evaluate cells starting with these as formulas (OWASP "CSV Injection").
_FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")


def neutralise_csv_cell(value):
    """Prefix text that a spreadsheet would run as a formula with an apostrophe.

    Numbers are returned unchanged, so negative values stay numeric.

    Examples
    --------
    >>> neutralise_csv_cell("=HYPERLINK(\\"x\\")")
    '\\'=HYPERLINK("x")'
    >>> neutralise_csv_cell(-3.5)
    -3.5
    """
    if isinstance(value, str) and value.startswith(_FORMULA_PREFIXES):
        return "'" + value
    return value


def neutralise_frame(frame):
    """Return a copy of a pandas DataFrame with every text cell neutralised."""
    out = frame.copy()
    for column in out.columns:
        if out[column].dtype == object or str(out[column].dtype) in ("string", "str"):
            out[column] = out[column].map(neutralise_csv_cell)
    return out


def atomic_write_bytes(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` so readers see the old file or the new one, never a part."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def atomic_write_text(path: Path, text: str) -> None:
    """Write UTF-8 text atomically (see :func:`atomic_write_bytes`)."""
    atomic_write_bytes(path, text.encode("utf-8"))


_RESERVED = {
    "con",
    "prn",
    "aux",
    "nul",
    *(f"com{i}" for i in range(1, 10)),
    *(f"lpt{i}" for i in range(1, 10)),
}


def safe_filename(name: str, *, default: str = "unnamed") -> str:
    """Turn text from an input file into a file name that stays inside its folder.

    Path separators, ``..``, control characters and names reserved on Windows
    are replaced, so a block called ``../../etc/passwd`` cannot escape.

    Examples
    --------
    >>> safe_filename("../../etc/passwd")
    'etc_passwd'
    >>> safe_filename("CON")
    '_CON'
    """
    text = re.sub(r"[^\w.\-]+", "_", str(name), flags=re.UNICODE)
    text = re.sub(r"\.{2,}", "_", text).strip("._ ")
    if not text:
        text = default
    if text.split(".")[0].lower() in _RESERVED:
        text = "_" + text
    return text[:120]


@contextmanager
def staged_folder(out_dir: Path, *, force: bool = False) -> Iterator[Path]:
    """Yield a temporary folder beside ``out_dir``; on success swap it into place.

    A failure (or a kill) before the swap leaves ``out_dir`` as it was. With
    ``force`` an existing plan is replaced: it is first renamed aside and only
    deleted after the new folder is in place, so at every moment a complete
    plan exists under one of the two names.
    """
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputExistsError(f"{out_dir}: exists and is not a folder; choose another --out")
    if out_dir.is_dir() and any(out_dir.iterdir()) and not force:
        raise OutputExistsError(
            f"{out_dir}: folder is not empty; choose another --out or pass --force to replace it"
        )
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", suffix=".partial", dir=out_dir.parent))
    try:
        yield stage
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    old = None
    if out_dir.exists():
        old = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", suffix=".old", dir=out_dir.parent))
        os.replace(out_dir, old / "plan")
    os.replace(stage, out_dir)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
