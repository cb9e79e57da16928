"""Raw edges stored compactly: one chunk = one unit over one span of run time.

`t_data` is zlib (RFC 1950) of the little-endian int64 differences of `t_ns`, the first difference
taken from the chunk's `t_lo_ns`; `level_data` is zlib of the levels packed eight to a byte
(`numpy.packbits`, most significant bit first). Edge times within a chunk are non-decreasing, so the
differences are small and compress well.
"""

from __future__ import annotations

import zlib

import numpy as np

ZLIB_LEVEL = 3


def encode_edges(t_ns: np.ndarray, level: np.ndarray) -> tuple[int, int, bytes, bytes]:
    """(t_lo_ns, t_hi_ns, t_data, level_data) for one chunk; `t_ns` must be non-empty."""
    t = np.ascontiguousarray(t_ns, dtype=np.int64)
    deltas = np.diff(t, prepend=t[:1]).astype("<i8", copy=False)
    t_data = zlib.compress(deltas.tobytes(), ZLIB_LEVEL)
    level_data = zlib.compress(np.packbits(np.asarray(level, dtype=np.uint8) != 0).tobytes(), ZLIB_LEVEL)
    return int(t[0]), int(t[-1]), t_data, level_data


def decode_edges(t_lo_ns: int, count: int, t_data: bytes, level_data: bytes) -> tuple[np.ndarray, np.ndarray]:
    """(t_ns int64, level uint8) of one chunk."""
    deltas = np.frombuffer(zlib.decompress(t_data), dtype="<i8")
    if len(deltas) != count:
        raise ValueError(f"edge chunk holds {len(deltas)} times, expected {count}")
    t = np.cumsum(deltas, dtype=np.int64) + np.int64(t_lo_ns)
    bits = np.unpackbits(np.frombuffer(zlib.decompress(level_data), dtype=np.uint8), count=count)
    return t, bits.astype(np.uint8)
