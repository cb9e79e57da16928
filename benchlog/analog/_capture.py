"""Analog captures: a time base and one or more voltage channels, read from CSV, .npz or WAV.

A capture keeps its time base as `t0_s + i * dt_s` whenever the samples are evenly spaced (time printed
with few digits is put back on its grid), and as an explicit array only when they are not (a logger with
an uneven clock). Voltages are float64 volts, one array per channel.
"""

from __future__ import annotations

import re
import wave
import zipfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from benchlog.analog._csv import read_columns, sniff
from benchlog.errors import DataError

_UNIT = {
    "s": 1.0,
    "sec": 1.0,
    "ms": 1e-3,
    "us": 1e-6,
    "µs": 1e-6,
    "μs": 1e-6,
    "ns": 1e-9,
    "hz": -1.0,
    "khz": -1e3,
    "mhz": -1e6,
    "ghz": -1e9,
    "s/s": -1.0,
    "sa/s": -1.0,
    "ks/s": -1e3,
    "ksa/s": -1e3,
    "ms/s": -1e6,
    "msa/s": -1e6,
    "gs/s": -1e9,
    "gsa/s": -1e9,
}
_QUANTITY = re.compile(r"^\s*([+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?)\s*([a-zA-Zµμ/]*)\s*$")
_INTERVAL_KEYS = ("sample interval", "sampling interval", "sample period", "time per point", "time step",
                  "timestep", "increment", "xinc", "interval", "dt")  # fmt: skip
_RATE_KEYS = ("sample rate", "sampling rate", "samples per second", "sample frequency", "sampling frequency")
_START_KEYS = ("start time", "x origin", "xorg", "t0", "start")
_TIME_NAME = re.compile(r"^(time|t|x|sec|second|seconds|s|zeit|temps|tiempo)\b", re.IGNORECASE)
_INDEX_NAME = re.compile(r"^(index|idx|sample|samples|point|pt|n|no|#)\b", re.IGNORECASE)
_NAME_UNIT = re.compile(r"[\(\[/]\s*(s|ms|us|µs|μs|ns)\s*\]?\)?\s*$", re.IGNORECASE)


@dataclass(frozen=True, slots=True, eq=False)
class Capture:
    """One capture. `volts[i]` is channel `names[i]`; sample k is at `t0_s + k dt_s` (or `t_s[k]`)."""

    source: str
    names: tuple[str, ...]
    volts: tuple[np.ndarray, ...]
    t0_s: float
    dt_s: float
    t_s: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.volts[0]) if self.volts else 0

    @property
    def end_s(self) -> float:
        return float(self.times_s(np.array([len(self) - 1]))[0]) if len(self) else self.t0_s

    def times_s(self, idx: np.ndarray) -> np.ndarray:
        """Seconds of the samples `idx` (integer, or fractional for interpolated positions)."""
        idx = np.asarray(idx)
        if self.t_s is None:
            return self.t0_s + idx * self.dt_s
        if idx.dtype.kind in "iu":
            return self.t_s[idx]
        return np.interp(idx, np.arange(len(self.t_s)), self.t_s)

    def channel(self, key: str | int) -> int:
        """Index of a channel by name (case-insensitive), by index, or by 1-based number as text."""
        if isinstance(key, int):
            if 0 <= key < len(self.names):
                return key
        else:
            low = [n.lower() for n in self.names]
            if key.lower() in low:
                return low.index(key.lower())
            if key.isdigit() and 1 <= int(key) <= len(self.names):
                return int(key) - 1
        raise DataError(f"{self.source}: no channel {key!r}; channels: {', '.join(self.names)}")


def _quantity(text: str) -> float | None:
    """'1.0E-07', '100 ns', '10 MS/s' -> seconds per sample (rates inverted); None if not a quantity."""
    m = _QUANTITY.match(text.replace(",", ".") if text.count(",") == 1 and "." not in text else text)
    if not m:
        return None
    value = float(m.group(1).replace(",", "."))
    unit = m.group(2).lower()
    if not unit:
        return value
    scale = _UNIT.get(unit)
    if scale is None:
        return None
    return value * scale if scale > 0 else (1.0 / (value * -scale) if value > 0 else None)


def _header_entry(header: tuple[tuple[str, ...], ...], keys: tuple[str, ...]) -> float | None:
    for fields in header:
        parts = list(fields)
        if len(parts) < 2:
            continue
        key = parts[0].strip().strip(":").lower()
        if key in keys or any(key.startswith(k) for k in keys if len(k) > 3):
            for cell in parts[1:]:
                q = _quantity(cell)
                if q is not None:
                    return q
    return None


def _time_scale(name: str) -> float:
    m = _NAME_UNIT.search(name)
    return _UNIT[m.group(1).lower()] if m else 1.0


def _grid(t: np.ndarray, source: str) -> tuple[float, float, np.ndarray | None]:
    """(t0, dt, None) if `t` is an even grid within its printing precision, else (t0, mean dt, t)."""
    n = len(t)
    if n < 2:
        return (float(t[0]) if n else 0.0), 1.0, None
    t0, t1 = float(t[0]), float(t[-1])
    if not t1 > t0:
        raise DataError(f"{source}: the time column does not increase")
    dt = (t1 - t0) / (n - 1)
    worst = 0.0
    step = 1 << 16  # segments that stay in cache, through one reused buffer
    ramp = np.arange(step) * dt
    dev = np.empty(step)
    for a in range(0, n, step):
        seg = t[a : a + step]
        d = np.subtract(seg, ramp[: len(seg)], out=dev[: len(seg)])
        d -= t0 + a * dt
        worst = max(worst, float(d.max()), -float(d.min()))
    # time printed with ~7 significant digits may sit a print step off its grid
    if worst <= max(0.25 * dt, 2e-7 * max(abs(t0), abs(t1))):
        return t0, dt, None
    steps = np.diff(t)
    if (steps <= 0).any():
        k = int(np.argmax(steps <= 0))
        raise DataError(f"{source}: time does not increase at data row {k + 2}")
    return t0, dt, t


def read_csv(
    path: str | Path, *, interval_s: float | None = None, time_column: str | int | None = "auto"
) -> Capture:
    """A CSV export. `time_column`: "auto", a name or index, or None (no time column: the header's
    sample interval, or `interval_s`, gives the time base)."""
    path = Path(path)
    layout = sniff(path)
    names = [n or f"ch{i + 1}" for i, n in enumerate(layout.names)]
    header_dt = _header_entry(layout.header, _INTERVAL_KEYS)
    rate_dt = _header_entry(layout.header, _RATE_KEYS)
    start = _header_entry(layout.header, _START_KEYS) or 0.0
    dt = interval_s or header_dt or rate_dt
    cols = read_columns(path, layout, list(range(layout.columns)))
    if not len(cols[0]):
        raise DataError(f"{path}: no data rows")
    tcol: int | None
    if time_column is None or time_column == "none":
        tcol = None
    elif time_column == "auto":
        tcol = None
        first = cols[0]
        named_time = bool(_TIME_NAME.match(layout.names[0].strip()))
        named_index = bool(_INDEX_NAME.match(layout.names[0].strip()))
        steps_up = len(first) > 1 and bool(np.all(np.diff(first[: 1 << 16]) > 0))
        if layout.columns > 1 and (named_time or named_index or (steps_up and not layout.names[0])):
            tcol = 0
    else:
        key = time_column
        tcol = Capture(str(path), tuple(names), (), 0.0, 1.0).channel(
            int(key) if isinstance(key, int) else str(key)
        )
    t_s: np.ndarray | None = None
    if tcol is not None:
        t = cols[tcol]
        is_index = bool(_INDEX_NAME.match(layout.names[tcol].strip())) or (
            dt is not None and np.all(t[: 1 << 16] == np.round(t[: 1 << 16]))
        )
        if is_index and dt is not None:
            t0, step = start + float(t[0]) * dt, dt
            if not np.all(np.diff(t[: 1 << 16]) == 1):
                t_s = start + t * dt
        elif is_index and dt is None and _INDEX_NAME.match(layout.names[tcol].strip()):
            raise DataError(f"{path}: column {names[tcol]!r} is a sample index but no sample interval is "
                            "given in the header; pass the interval (e.g. --interval 1e-6)")  # fmt: skip
        else:
            scale = _time_scale(layout.names[tcol])
            t0, step, t_s = _grid(t * scale if scale != 1.0 else t, str(path))
        del names[tcol]
        del cols[tcol]
    else:
        if dt is None:
            raise DataError(
                f"{path}: no time column and no sample interval in the header; pass the interval "
                "(e.g. --interval 1e-6)"
            )
        t0, step = start, dt
    if not cols:
        raise DataError(f"{path}: a time column and no voltage column")
    if not step > 0:
        raise DataError(f"{path}: the sample interval must be positive, got {step:g} s")
    return Capture(str(path), tuple(names), tuple(cols), float(t0), float(step), t_s)


def read_npz(path: str | Path, *, interval_s: float | None = None) -> Capture:
    """`.npz` with 1-D arrays: a time array (`t`, `t_s` or `time`) or an interval (`dt`, `dt_s`,
    `interval`; with optional `t0`/`t0_s`), and one array per channel (any other name)."""
    path = Path(path)
    try:
        with np.load(path, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
    except (OSError, ValueError, zipfile.BadZipFile) as exc:
        raise DataError(f"{path}: not a readable .npz file ({exc})") from exc
    tkey = next((k for k in ("t", "t_s", "time") if k in arrays), None)
    dkey = next((k for k in ("dt", "dt_s", "interval", "sample_interval") if k in arrays), None)
    t0 = float(next((arrays[k] for k in ("t0", "t0_s") if k in arrays), 0.0))
    skip = {tkey, dkey, "t0", "t0_s"}
    chans = {k: v for k, v in arrays.items() if k not in skip and v.ndim == 1 and v.dtype.kind in "fiu"}
    if not chans:
        raise DataError(f"{path}: no 1-D numeric channel arrays")
    lengths = {len(v) for v in chans.values()}
    if len(lengths) != 1:
        raise DataError(f"{path}: channel arrays differ in length ({sorted(lengths)})")
    volts = tuple(np.asarray(v, np.float64) for v in chans.values())
    t_s = None
    if tkey is not None:
        if len(arrays[tkey]) != len(volts[0]):
            raise DataError(f"{path}: {tkey} has {len(arrays[tkey])} samples, the channels {len(volts[0])}")
        t0, step, t_s = _grid(np.asarray(arrays[tkey], np.float64), str(path))
    else:
        step = interval_s or (float(arrays[dkey]) if dkey else 0.0)
        if not step > 0:
            raise DataError(f"{path}: no time array and no positive interval (dt); pass --interval")
    return Capture(str(path), tuple(chans), volts, t0, float(step), t_s)


def read_wav(path: str | Path, *, full_scale_v: float = 1.0) -> Capture:
    """PCM WAV (8, 16, 24 or 32 bit). Full scale reads as `full_scale_v` volts (WAV carries no volts)."""
    path = Path(path)
    try:
        w = wave.open(str(path), "rb")
    except (wave.Error, EOFError, OSError) as exc:
        raise DataError(f"{path}: not a PCM WAV file the reader knows ({exc})") from exc
    with w:
        nch, width, rate, n = w.getnchannels(), w.getsampwidth(), w.getframerate(), w.getnframes()
        out = [np.empty(n, np.float64) for _ in range(nch)]
        scale = full_scale_v / float(1 << (8 * width - 1))
        done = 0
        while done < n:
            raw = w.readframes(min(1 << 20, n - done))
            if not raw:
                break
            frames = _pcm(raw, width).reshape(-1, nch)
            for ch in range(nch):
                out[ch][done : done + len(frames)] = frames[:, ch] * scale
            done += len(frames)
    names = tuple(f"ch{i + 1}" for i in range(nch))
    return Capture(str(path), names, tuple(a[:done] for a in out), 0.0, 1.0 / rate, None)


def _pcm(raw: bytes, width: int) -> np.ndarray:
    if width == 1:
        return np.frombuffer(raw, np.uint8).astype(np.int32) - 128
    if width == 2:
        return np.frombuffer(raw, "<i2")
    if width == 3:
        b = np.frombuffer(raw, np.uint8).reshape(-1, 3).astype(np.int32)
        v = b[:, 0] | (b[:, 1] << 8) | (b[:, 2] << 16)
        return np.where(v >= 1 << 23, v - (1 << 24), v)
    return np.frombuffer(raw, "<i4")


def read_capture(
    path: str | Path,
    *,
    interval_s: float | None = None,
    time_column: str | int | None = "auto",
    full_scale_v: float = 1.0,
) -> Capture:
    """Any supported capture, by its extension (.npz, .wav; anything else is read as CSV text)."""
    p = Path(path)
    if not p.is_file():
        raise DataError(f"{p}: no such file")
    ext = p.suffix.lower()
    if ext == ".npz":
        return read_npz(p, interval_s=interval_s)
    if ext == ".wav":
        return read_wav(p, full_scale_v=full_scale_v)
    return read_csv(p, interval_s=interval_s, time_column=time_column)
