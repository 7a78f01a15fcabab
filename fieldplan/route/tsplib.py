"""Reading TSPLIB ``EUC_2D`` instances, used to check route quality.

Reference: Reinelt (1991), "TSPLIB - A Traveling Salesman Problem Library",
ORSA J. Computing 3(4). ``EUC_2D`` distance is ``nint`` of the Euclidean distance.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from fieldplan.errors import InputError

__all__ = ["euc2d_length", "read_tsplib"]


def read_tsplib(path: str | Path) -> np.ndarray:
    """Coordinates of a TSPLIB file with ``EDGE_WEIGHT_TYPE: EUC_2D``.

    Returns
    -------
    (n, 2) array in the file's node order.
    """
    path = Path(path)
    rows: list[list[float]] = []
    in_coords = False
    kind = None
    for line in path.read_text(encoding="ascii").splitlines():
        text = line.strip()
        if ":" in text and not in_coords:
            key, _, value = text.partition(":")
            if key.strip() == "EDGE_WEIGHT_TYPE":
                kind = value.strip()
        if text == "NODE_COORD_SECTION":
            in_coords = True
        elif text == "EOF":
            break
        elif in_coords and text:
            rows.append([float(v) for v in text.split()[1:3]])
    if kind != "EUC_2D" or not rows:
        raise InputError(f"{path}: not a TSPLIB EUC_2D file with a NODE_COORD_SECTION")
    return np.asarray(rows)


def euc2d_length(xy: np.ndarray, order: np.ndarray) -> int:
    """Closed tour length under TSPLIB ``EUC_2D`` (each edge rounded to nearest integer)."""
    a = np.asarray(xy)[np.asarray(order)]
    b = np.roll(a, -1, axis=0)
    # nint(x) = floor(x + 0.5), as TSPLIB defines it (numpy's rint rounds half to even).
    return int(np.floor(np.hypot(*(a - b).T) + 0.5).sum())
