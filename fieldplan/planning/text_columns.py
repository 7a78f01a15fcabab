"""Text columns of a plan's point table, built whole instead of string by string.

A plan of 30,000 points carries several text columns (ids, blocks, instructions).
Built as Python strings and handed to pandas, each is converted to pandas' text
type once more; joined with ``+`` on Series, each step is another pass with
pandas' checks. Here a column is joined once, element by element, in Arrow when
pandas keeps its text in Arrow (pandas 3 with pyarrow), and with one Python pass
otherwise. Either way the column has the type pandas would give the same strings
(so writers see the same frame), and the same text.

:func:`bulk_points` makes a table's point geometries with the cyclic garbage
collector paused: each geometry is a tracked object, and tens of thousands in a
row set off collections (full ones too) that find nothing.
"""

from __future__ import annotations

import gc
from functools import lru_cache
from typing import Any

import numpy as np
import pandas as pd

__all__ = [
    "bulk_points",
    "is_text",
    "join_text",
    "repeat_text",
    "take_text",
    "text_column",
    "text_dtype",
    "to_text",
    "zero_padded",
]


@lru_cache(maxsize=1)
def text_dtype() -> Any:
    """The dtype pandas gives a column of Python strings (``str`` in pandas 3, else object)."""
    return pd.Series(["x"]).dtype


def is_text(dtype: Any) -> bool:
    """Whether ``dtype`` is pandas' own text type for Python strings (not ``object``)."""
    return isinstance(dtype, pd.StringDtype) and dtype == text_dtype()


def _arrow() -> bool:
    return getattr(text_dtype(), "storage", None) == "pyarrow"


@lru_cache(maxsize=1)
def _arrow_type() -> Any:
    """The Arrow type pandas keeps its text in (``large_string`` in pandas 3)."""
    import pyarrow as pa

    return pa.array(pd.array(["x"], dtype=text_dtype())).type


def _wrap(values: Any) -> Any:
    """An Arrow array of strings as a pandas column of :func:`text_dtype`."""
    return pd.array(values, dtype=text_dtype())


def _arrow_part(part: Any, n: int) -> Any:
    import pyarrow as pa
    import pyarrow.compute as pc

    kind = _arrow_type()
    if isinstance(part, str):
        return pa.scalar(part, type=kind)
    if isinstance(part, pd.Series):
        part = part.array
    if getattr(part.dtype, "storage", None) == "pyarrow":
        out = pa.array(part)  # a pandas text array: its Arrow data, not copied
        return out if out.type == kind else pc.cast(out, kind)
    arr = np.asarray(part)
    if len(arr) != n:
        raise ValueError(f"a text part has {len(arr)} rows, not {n}")
    if arr.dtype.kind in "iu":
        return pc.cast(pa.array(arr), kind)
    return pa.array(arr.astype(object), type=kind)


def to_text(values: Any) -> Any:
    """Strings, or whole numbers to write in decimal, as a pandas column of :func:`text_dtype`.

    Parameters
    ----------
    values : numpy.ndarray, pandas Series or array
        Python strings (object array), integers, fixed-width ASCII byte strings
        (each its full width, as :func:`fieldplan.samples.ids.sample_id_bytes` gives
        them), or a pandas text column.
    """
    if isinstance(values, pd.Series):
        values = values.array
    if isinstance(values, np.ndarray) and values.dtype.kind == "S":
        return _ascii_text(values)
    if _arrow():
        return _wrap(_arrow_part(values, len(values)))
    arr = np.asarray(values)
    return (arr.astype(str) if arr.dtype.kind in "iu" else arr).astype(object)


def _ascii_text(values: np.ndarray) -> Any:
    """Fixed-width ASCII byte strings (``numpy.bytes_``, no padding) as text, without a Python string each."""
    width = values.dtype.itemsize
    if not _arrow() or not values.size:
        return to_text(values.astype(f"<U{width}").astype(object))
    import pyarrow as pa
    import pyarrow.compute as pc

    data = pa.py_buffer(np.ascontiguousarray(values).view(np.uint8))
    fixed = pa.FixedSizeBinaryArray.from_buffers(pa.binary(width), len(values), [None, data])
    return _wrap(pc.cast(pc.cast(fixed, pa.binary()), _arrow_type()))


def text_column(values: Any) -> Any:
    """Python strings (an object array or list) as a column of :func:`text_dtype`."""
    return to_text(np.asarray(values, dtype=object))


def repeat_text(value: str, n: int) -> Any:
    """A column of ``n`` times the same string."""
    if _arrow():
        import pyarrow as pa

        return _wrap(pa.repeat(pa.scalar(value, type=_arrow_type()), n))
    out = np.empty(n, dtype=object)
    out[:] = value
    return out


def take_text(labels: list[str], index: np.ndarray) -> Any:
    """The column ``labels[index]``: a few distinct strings spread over many rows."""
    index = np.asarray(index, dtype=np.int64)
    if _arrow():
        import pyarrow as pa

        return _wrap(pa.array(labels, type=_arrow_type()).take(pa.array(index)))
    return np.asarray(labels, dtype=object)[index]


def join_text(parts: list[Any], n: int) -> Any:
    """Join ``parts`` element by element into a text column of ``n`` rows.

    Parameters
    ----------
    parts : list
        Each a string (the same in every row), an integer array (written in
        decimal, as ``str(int)``), an object array of strings or a pandas text
        column, of ``n`` rows. None of them may hold missing values.
    n : int
        Rows.

    Examples
    --------
    >>> list(join_text(["row ", np.array([3, 12]), ", ", np.array(["a", "b"], dtype=object)], 2))
    ['row 3, a', 'row 12, b']
    """
    if not any(not isinstance(p, str) for p in parts):
        return repeat_text("".join(parts), n)
    if _arrow():
        import pyarrow.compute as pc

        pieces = [_arrow_part(p, n) for p in parts if not (isinstance(p, str) and p == "")]
        return _wrap(pc.binary_join_element_wise(*pieces, _arrow_part("", n)))
    columns = []
    for p in parts:
        if isinstance(p, str):
            columns.append([p] * n)
        else:
            arr = np.asarray(p.array if isinstance(p, pd.Series) else p)
            columns.append((arr.astype(str) if arr.dtype.kind in "iu" else arr).tolist())
    out = np.empty(n, dtype=object)
    out[:] = ["".join(row) for row in zip(*columns, strict=True)]
    return out


def zero_padded(values: np.ndarray, width: int) -> Any:
    """Non-negative whole numbers in decimal, padded with zeros to ``width`` (as ``str.zfill``)."""
    values = np.asarray(values)
    if _arrow():
        import pyarrow as pa
        import pyarrow.compute as pc

        text = pc.cast(pa.array(values), _arrow_type())
        return _wrap(pc.utf8_lpad(text, width=width, padding="0"))
    return np.char.zfill(values.astype(str), width).astype(object)


def bulk_points(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """:func:`shapely.points` of ``x``, ``y`` with the cyclic collector paused (points hold no cycles)."""
    import shapely

    enabled = gc.isenabled()
    gc.disable()
    try:
        return shapely.points(np.asarray(x, dtype=float), np.asarray(y, dtype=float))
    finally:
        if enabled:
            gc.enable()
