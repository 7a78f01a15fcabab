"""Safe writing: atomic files and folders, spreadsheet-safe CSV cells, safe file names."""

from __future__ import annotations

import ctypes
import os
import re
import shutil
import stat
import sys
import tempfile
import time
from collections.abc import Iterable, Iterator
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
    "clean_stale_stages",
    "check_out_dir",
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
    """Return a copy of a pandas DataFrame with every text cell neutralised.

    Same result as :func:`neutralise_csv_cell` on each cell, with pandas string
    methods per column: only text cells starting with a formula character
    change; numbers, missing values and other objects are left as they are.
    """
    import numpy as np
    import pandas as pd

    out = frame.copy()
    for i in range(out.shape[1]):
        col = out.iloc[:, i]
        if not (col.dtype == object or str(col.dtype) in ("string", "str")):
            continue
        try:
            hit = col.str.startswith(_FORMULA_PREFIXES, na=False).to_numpy(dtype=bool, na_value=False)
        except (AttributeError, TypeError):  # pandas found no text in the column
            hit = np.zeros(len(col), dtype=bool)
        values = col.to_numpy(dtype=object).copy()
        values[hit] = ["'" + v for v in values[hit]]
        # Rebuilt from a list so pandas infers the column type as Series.map
        # did (e.g. whole numbers with gaps become floats), keeping the bytes.
        out.isetitem(i, pd.Series(values.tolist(), index=col.index, name=col.name))
    return out


def atomic_write_bytes(path: Path, data: bytes | Iterable[bytes]) -> None:
    """Write ``data`` to ``path`` so readers see the old file or the new one, never a part.

    ``data`` may be an iterable of byte strings, written in turn (a large file need not be
    held in memory whole).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    # The process id in the name lets a later run tell a killed writer's debris from a live one.
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.{os.getpid()}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as handle:
            if isinstance(data, bytes | bytearray | memoryview):
                handle.write(data)
            else:
                for chunk in data:
                    handle.write(chunk)
            handle.flush()
            os.fsync(handle.fileno())
        # mkstemp makes owner-only files; plan files are meant to be shared like any other,
        # and a file being replaced keeps the mode it had. os.replace swaps a link planted
        # under the name for the file; it never writes through the link.
        try:
            old = os.stat(path, follow_symlinks=False)
            mode = old.st_mode & 0o7777 if stat.S_ISREG(old.st_mode) else 0o666 & ~_umask()
        except FileNotFoundError:
            mode = 0o666 & ~_umask()
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def atomic_write_text(path: Path, text: str) -> None:
    """Write UTF-8 text atomically (see :func:`atomic_write_bytes`)."""
    atomic_write_bytes(path, text.encode("utf-8"))


# Windows device names, also with superscript digits (Microsoft "Naming Files, Paths, and Namespaces").
_RESERVED = {
    "con",
    "prn",
    "aux",
    "nul",
    "conin$",
    "conout$",
    *(f"{dev}{d}" for dev in ("com", "lpt") for d in "0123456789\u00b9\u00b2\u00b3"),
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
    # Windows drops trailing dots and spaces, which could turn "x." into "x" or ".." into "".
    return text[:120].rstrip(". ") or default


_STAGE = re.compile(r"^\.(?P<name>.+)\.(?P<pid>\d+)\.[^.]+\.(?P<kind>partial|old)$")
# A live owner older than this is a reused process id, not a run still writing.
_MAX_RUN_S = 30 * 86400.0


def _pid_alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True
    return True


def clean_stale_stages(out_dir: Path) -> list[Path]:
    """Remove staging folders of ``out_dir`` left behind by killed runs; return what was removed.

    A staging folder is ``.NAME.PID.RANDOM.partial`` (or ``.old``) beside
    ``out_dir``; it is stale when process PID no longer runs. If ``out_dir``
    itself is missing but a complete old plan was set aside by a run killed in
    the middle of the swap, that plan is put back first.
    """
    out_dir = Path(out_dir)
    parent = out_dir.parent
    if not parent.is_dir():
        return []
    removed: list[Path] = []
    now = time.time()
    # Only names that can be this folder's stages are sorted and checked: a busy parent (a home
    # folder, /tmp) holds thousands of other entries that would cost more than the whole write.
    prefix = f".{out_dir.name}."
    for entry in sorted(parent / name for name in os.listdir(parent) if name.startswith(prefix)):
        match = _STAGE.match(entry.name)
        if match is None or match["name"] != out_dir.name or not entry.is_dir():
            continue
        if _pid_alive(int(match["pid"])) and now - entry.stat().st_mtime < _MAX_RUN_S:
            continue
        kept = entry / "plan"
        if match["kind"] == "old" and kept.is_dir() and not out_dir.exists():
            os.replace(kept, out_dir)
        shutil.rmtree(entry, ignore_errors=True)
        removed.append(entry)
    return removed


def _exchange(a: Path, b: Path) -> bool:
    """Swap two paths in one step (Linux ``renameat2(RENAME_EXCHANGE)``); False if unsupported."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        return False
    renameat2.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    renameat2.restype = ctypes.c_int
    at_fdcwd, rename_exchange = -100, 2
    if renameat2(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange) == 0:
        return True
    err = ctypes.get_errno()
    if err in (22, 38, 95):  # EINVAL, ENOSYS, EOPNOTSUPP: file system or kernel cannot exchange
        return False
    raise OSError(err, os.strerror(err), str(a))


def _fsync_dir(path: Path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _is_plan_folder(folder: Path) -> bool:
    import json

    try:
        manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(manifest, dict) and "fieldplan_version" in manifest


def check_out_dir(out_dir: Path, *, force: bool = False) -> None:
    """Refuse an output folder that holds files, unless ``force`` and it holds a plan.

    ``--force`` replaces the whole folder, so it is only honoured for a folder
    fieldplan wrote (its ``manifest.json`` names a fieldplan version): a slip
    such as ``--out . --force`` must not delete a working folder.
    """
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise OutputExistsError(f"{out_dir}: exists and is not a folder; choose another --out")
    if not out_dir.is_dir() or not any(out_dir.iterdir()):
        return
    if not force:
        raise OutputExistsError(
            f"{out_dir}: folder is not empty; choose another --out or pass --force to replace it"
        )
    if not _is_plan_folder(out_dir):
        raise OutputExistsError(
            f"{out_dir}: holds files but no fieldplan plan (no manifest.json from fieldplan); "
            "--force only replaces a plan folder: choose a new or empty --out"
        )


@contextmanager
def staged_folder(out_dir: Path, *, force: bool = False, aside: Path | None = None) -> Iterator[Path]:
    """Yield a temporary folder beside ``out_dir``; on success swap it into place.

    A failure (or a kill) before the swap leaves ``out_dir`` as it was. With
    ``force`` an existing plan is replaced in one atomic exchange where the
    system offers it (Linux ``renameat2``); elsewhere the old plan is first
    renamed aside and only deleted after the new folder is in place, and a run
    killed between the two renames has the old plan put back by the next run.
    Staging folders of killed runs are removed on the next write.

    With ``aside`` an existing plan is not deleted but renamed to ``aside``
    (beside ``out_dir``) just before the new folder takes its place.
    """
    out_dir = Path(out_dir)
    clean_stale_stages(out_dir)
    check_out_dir(out_dir, force=force)
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    prefix = f".{out_dir.name}.{os.getpid()}."
    stage = Path(tempfile.mkdtemp(prefix=prefix, suffix=".partial", dir=out_dir.parent))
    try:
        yield stage
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    os.chmod(stage, 0o777 & ~_umask())
    if aside is not None and out_dir.exists():
        os.rename(out_dir, aside)
        os.replace(stage, out_dir)
        _fsync_dir(out_dir.parent)
        return
    if out_dir.exists() and _exchange(stage, out_dir):
        _fsync_dir(out_dir.parent)
        shutil.rmtree(stage, ignore_errors=True)
        return
    old = None
    if out_dir.exists():
        old = Path(tempfile.mkdtemp(prefix=prefix, suffix=".old", dir=out_dir.parent))
        os.replace(out_dir, old / "plan")
    os.replace(stage, out_dir)
    _fsync_dir(out_dir.parent)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask
