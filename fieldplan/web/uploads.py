"""Uploaded files: staged in a private temporary folder, checked, never named by the sender.

The sender's file name is kept for display only; on disk an upload is called
``blocks.<ext>`` (or a sanitised name for results tables) inside a fresh
temporary folder outside the workspace, removed after use or after
:data:`TTL_S`. A refused upload leaves nothing behind.

Zip archives are opened and every member is checked before any reader sees
them: names must be relative and stay inside the archive (no ``..``, no absolute
path, no drive letter, no link), the member count is bounded and the members are
decompressed in chunks, counting bytes, so a zip bomb is refused after reading
at most :func:`zip_limit` bytes.
"""

from __future__ import annotations

import os
import re
import secrets
import shutil
import stat
import tempfile
import threading
import time
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

from fieldplan.web.workspace import WebError

__all__ = ["BLOCK_SUFFIXES", "Staged", "Uploads", "check_zip", "zip_limit", "read_capped"]

BLOCK_SUFFIXES = {
    ".geojson": ".geojson",
    ".json": ".geojson",
    ".gpkg": ".gpkg",
    ".zip": ".zip",
    ".kml": ".kml",
}
RESULT_SUFFIXES = {".csv", ".txt"}
MAX_ZIP_MEMBERS = 64
TTL_S = 2 * 3600.0
_CHUNK = 1 << 20


def zip_limit(max_bytes: int) -> int:
    """Most bytes a zip upload may unpack to: ten times the upload cap (a Shapefile packs about 2-4x)."""
    return 10 * int(max_bytes)


def read_capped(fileobj, max_bytes: int, *, parameter: str = "file") -> bytes:
    """Read an upload stream, refusing it (413) past ``max_bytes``."""
    chunks, seen = [], 0
    while True:
        chunk = fileobj.read(_CHUNK)
        if not chunk:
            break
        seen += len(chunk)
        if seen > max_bytes:
            raise WebError(
                413,
                f"upload too large: the limit is {max_bytes / 1e6:g} MB (fieldplan serve --max-upload-mb)",
                parameter=parameter,
            )
        chunks.append(chunk)
    return b"".join(chunks)


_DRIVE = re.compile(r"^[A-Za-z]:")


def check_zip(path: Path, *, max_unpacked: int, parameter: str = "file") -> list[str]:
    """Refuse unsafe zip archives (422): bad member names, links, too many members, bombs.

    Returns the member names. Every member is decompressed once, in chunks, and
    the archive is refused as soon as the running total passes ``max_unpacked``.
    """
    try:
        archive = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, OSError):
        raise WebError(
            422, "the upload is not a readable zip archive; zip the Shapefile again", parameter=parameter
        ) from None
    with archive:
        infos = archive.infolist()
        if len(infos) > MAX_ZIP_MEMBERS:
            raise WebError(
                422,
                f"the zip holds {len(infos)} files; a zipped Shapefile needs fewer than {MAX_ZIP_MEMBERS}",
                parameter=parameter,
            )
        for info in infos:
            name = info.filename
            parts = re.split(r"[\\/]+", name)
            if (
                name.startswith(("/", "\\"))
                or _DRIVE.match(name)
                or ".." in parts
                or "\x00" in name
                or stat.S_ISLNK(info.external_attr >> 16)
            ):
                raise WebError(
                    422,
                    f"the zip holds an unsafe file name {name!r} (absolute, '..' or a link); refused",
                    parameter=parameter,
                )
        total = 0
        for info in infos:
            if info.is_dir():
                continue
            if total + info.file_size > max_unpacked:
                raise _bomb(max_unpacked, parameter)
            try:
                with archive.open(info) as member:
                    while True:
                        chunk = member.read(_CHUNK)
                        if not chunk:
                            break
                        total += len(chunk)
                        if total > max_unpacked:
                            raise _bomb(max_unpacked, parameter)
            except (zipfile.BadZipFile, OSError, RuntimeError, NotImplementedError, EOFError) as err:
                raise WebError(
                    422, f"the zip member {info.filename!r} cannot be read ({err})", parameter=parameter
                ) from None
        return [i.filename for i in infos]


def _bomb(limit: int, parameter: str) -> WebError:
    return WebError(
        413,
        f"the zip unpacks to more than {limit / 1e6:g} MB (ten times the upload limit); refused",
        parameter=parameter,
    )


@dataclass
class Staged:
    """An uploaded file waiting in its private folder."""

    id: str
    folder: Path
    path: Path
    original_name: str
    created: float = field(default_factory=time.monotonic)
    info: dict = field(default_factory=dict)


class Uploads:
    """Staged uploads by id; expired ones are removed on the next call."""

    def __init__(self, *, max_bytes: int) -> None:
        self.max_bytes = int(max_bytes)
        self._items: dict[str, Staged] = {}
        self._lock = threading.Lock()

    def _expire(self) -> None:
        now = time.monotonic()
        with self._lock:
            old = [k for k, v in self._items.items() if now - v.created > TTL_S]
            gone = [self._items.pop(k) for k in old]
        for item in gone:
            shutil.rmtree(item.folder, ignore_errors=True)

    def stage_blocks(self, data: bytes, original_name: str, *, parameter: str = "file") -> Staged:
        """Stage a block file; converts KML to GeoJSON for the reader. Raises WebError on refusal."""
        self._expire()
        suffix = Path(original_name or "").suffix.lower()
        if suffix not in BLOCK_SUFFIXES:
            raise WebError(
                415,
                f"{original_name!r}: unsupported file type; upload GeoJSON (.geojson), GeoPackage (.gpkg), "
                "a zipped Shapefile (.zip) or KML (.kml)",
                parameter=parameter,
            )
        if not data:
            raise WebError(422, f"{original_name!r}: the file is empty", parameter=parameter)
        folder = Path(tempfile.mkdtemp(prefix="fieldplan-upload-"))
        try:
            path = folder / f"blocks{BLOCK_SUFFIXES[suffix]}"
            _write_private(path, data)
            if suffix == ".zip":
                check_zip(path, max_unpacked=zip_limit(self.max_bytes), parameter=parameter)
            if suffix == ".kml":
                path = _kml_to_geojson(path, parameter=parameter)
        except BaseException:
            shutil.rmtree(folder, ignore_errors=True)
            raise
        item = Staged(id=secrets.token_urlsafe(12), folder=folder, path=path, original_name=original_name)
        with self._lock:
            self._items[item.id] = item
        return item

    def get(self, upload_id: str, *, parameter: str = "upload") -> Staged:
        self._expire()
        with self._lock:
            item = self._items.get(str(upload_id))
        if item is None or not item.path.exists():
            raise WebError(
                404, "that upload has expired or never existed; upload the file again", parameter=parameter
            )
        return item

    def discard(self, upload_id: str) -> None:
        with self._lock:
            item = self._items.pop(str(upload_id), None)
        if item is not None:
            shutil.rmtree(item.folder, ignore_errors=True)

    def close(self) -> None:
        with self._lock:
            items, self._items = list(self._items.values()), {}
        for item in items:
            shutil.rmtree(item.folder, ignore_errors=True)


def _write_private(path: Path, data: bytes) -> None:
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    with os.fdopen(fd, "wb") as handle:
        handle.write(data)


def _kml_to_geojson(path: Path, *, parameter: str) -> Path:
    """KML placemarks (OGC KML 2.2) as GeoJSON: name -> ``block``, the reader does the rest."""
    import pyogrio

    try:
        frame = pyogrio.read_dataframe(path)
    except Exception as err:
        raise WebError(
            422, f"the KML file cannot be read ({' '.join(str(err).split())[:200]})", parameter=parameter
        ) from None
    if len(frame) == 0:
        raise WebError(
            422, "the KML file holds no placemarks; export the block outlines again", parameter=parameter
        )
    frame = frame.rename(columns={c: c.lower() for c in frame.columns if c != "geometry"})
    if "name" in frame.columns and "block" not in frame.columns:
        frame = frame.rename(columns={"name": "block"})
    keep = [c for c in frame.columns if c not in ("description",) and frame[c].notna().any()]
    frame = frame[keep]
    import shapely

    # KML carries heights; blocks are flat.
    frame = frame.set_geometry(shapely.force_2d(frame.geometry.values), crs=frame.crs or "EPSG:4326")
    out = path.with_suffix(".geojson")
    frame.to_file(out, driver="GeoJSON", engine="pyogrio")
    return out
