"""Sampler clock error against the host clock, from beats."""

from __future__ import annotations

import numpy as np

from benchlog._robust import theil_sen

MIN_BEATS = 8
MIN_SPAN_NS = 10 * 1_000_000_000
MAX_KEPT = 1024


class DriftEstimator:
    """(host_ns, sampler ns) pairs of one counter epoch; a Theil-Sen slope gives the clock error.

    Host receive times carry USB and scheduling latency, sometimes large; the Theil-Sen estimator (median
    of pairwise slopes; benchlog._robust.theil_sen) ignores up to about 29 % of wild points. Memory stays
    bounded: past `MAX_KEPT` pairs every other one is dropped, so the pairs keep spanning the epoch.
    """

    def __init__(self) -> None:
        self._host: list[int] = []
        self._sampler: list[int] = []
        self._step = 1
        self._seen = 0
        self._cached: float | None = None
        self._dirty = False

    def clear(self) -> None:
        self.__init__()

    def add(self, host_ns: int, sampler_ns: int) -> None:
        self._seen += 1
        if (self._seen - 1) % self._step:
            return
        self._host.append(host_ns)
        self._sampler.append(sampler_ns)
        self._dirty = True
        if len(self._host) > MAX_KEPT:
            self._host = self._host[::2]
            self._sampler = self._sampler[::2]
            self._step *= 2

    def add_many(self, host_ns: np.ndarray, sampler_ns: np.ndarray) -> None:
        """`add` for each pair in order, with the thinning worked out per stretch, not per pair."""
        host, sampler = list(host_ns), list(sampler_ns)
        i, n = 0, len(host)
        while i < n:
            first = i + (-self._seen) % self._step  # the next pair `add` would keep
            room = MAX_KEPT + 1 - len(self._host)  # pairs kept before the next halving
            last = first + (room - 1) * self._step
            if last >= n:
                self._host += host[first : n : self._step]
                self._sampler += sampler[first : n : self._step]
                self._dirty = self._dirty or first < n
                self._seen += n - i
                return
            self._host += host[first : last + 1 : self._step]
            self._sampler += sampler[first : last + 1 : self._step]
            self._dirty = True
            self._seen += last + 1 - i
            self._host = self._host[::2]
            self._sampler = self._sampler[::2]
            self._step *= 2
            i = last + 1

    def ppm(self) -> float | None:
        """Sampler-clock error in ppm (positive: the sampler's clock runs fast), or None for too few."""
        if not self._dirty:
            return self._cached
        self._dirty = False
        if len(self._host) < MIN_BEATS or self._host[-1] - self._host[0] < MIN_SPAN_NS:
            self._cached = None
            return None
        host = np.asarray(self._host, np.int64)
        sampler = np.asarray(self._sampler, np.int64)
        x = (host - host[0]).astype(np.float64)
        y = (sampler - sampler[0]).astype(np.float64)
        slope = theil_sen(y, x).slope
        self._cached = float((slope - 1.0) * 1e6)
        return self._cached
