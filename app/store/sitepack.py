"""Pack a measurement's sites into one value and back (``measurement_sites``).

Format: an (n, 4) array of little-endian float64, row-major, columns x_mm, y_mm, dx_um, dy_um:
32 bytes a site, read back exactly (no rounding on the way).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

_DTYPE = np.dtype("<f8")
COLUMNS = ("x_mm", "y_mm", "dx_um", "dy_um")


def pack(x: NDArray[np.float64], y: NDArray[np.float64], dx: NDArray[np.float64],
         dy: NDArray[np.float64]) -> bytes:
    return np.column_stack((x, y, dx, dy)).astype(_DTYPE, copy=False).tobytes()


def pack_many(columns: NDArray[np.float64], counts: NDArray[np.int64]) -> list[bytes]:
    """Pack consecutive runs of rows: ``columns`` is (N, 4), ``counts`` the rows of each run."""
    data = np.ascontiguousarray(columns, dtype=_DTYPE).tobytes()
    ends = np.cumsum(counts) * 32
    starts = ends - np.asarray(counts) * 32
    return [data[s:e] for s, e in zip(starts.tolist(), ends.tolist(), strict=True)]


def unpack(blob: bytes) -> NDArray[np.float64]:
    """The (n, 4) array of a packed value."""
    if len(blob) % 32:
        raise ValueError(f"a site pack is a multiple of 32 bytes, got {len(blob)}")
    return np.frombuffer(blob, dtype=_DTYPE).reshape(-1, 4).astype(np.float64)
