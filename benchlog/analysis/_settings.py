"""What the segmenter needs to know about the bench and the part: windows, thresholds, contact wiring."""

from __future__ import annotations

from collections.abc import Iterable

from benchlog._slotted import Slotted
from benchlog.errors import ConfigError

MODES = ("auto", "drive", "free")

# A chatter event is an opening of a closed contact (or closing of an open one) longer than this.
# 10 us is the detection threshold several military relay specifications use for contact chatter
# (MIL-PRF-39016 and the chatter monitoring of MIL-STD-202 method 310; from memory). Others use longer.
DEFAULT_CHATTER_THRESHOLD_NS = 10_000


class AnalysisSettings(Slotted, frozen=True):
    """Everything that decides how edges become actuations. Times are integer nanoseconds.

    - `settle_ns`: a contact that stays in the new state this long has settled; excursions after that
      are chatter, not bounce.
    - `quiet_ns`: free-running channels start an actuation at the first edge after this long without
      edges (None: the settle window).
    - `chatter_threshold_ns`: an excursion in a stable period at least this long is a chatter event.
    - `glitch_floor_ns` / `resolution_ns`: pulses shorter than the larger of the two are glitches,
      counted apart and removed before measuring (resolution: one sampler tick).
    - `normally_closed`: channels whose contact is closed at rest (drive on -> break).
    - `form_c`: (normally-open channel, normally-closed channel) pairs that are one changeover switch;
      the normally-closed member is normally closed without listing it, and a drive on either member
      anchors both.
    - `mode`: "auto" (drive-anchored on a channel with drive records, free-running otherwise), "drive"
      or "free" (drive records ignored).
    - `lateness_ns`: how far behind the newest record an older record may still arrive (the sampler
      sends edges in batches); actuations are final once their data is older than this.
    - `max_pending_edges`: a channel whose unfinished actuation holds more edges than this (a contact
      chattering for hours with no drive) has it closed early and marked INCOMPLETE, so memory stays
      bounded.
    """

    __slots__ = (
        "settle_ns",
        "quiet_ns",
        "chatter_threshold_ns",
        "glitch_floor_ns",
        "resolution_ns",
        "normally_closed",
        "form_c",
        "mode",
        "lateness_ns",
        "max_pending_edges",
    )
    settle_ns: int
    quiet_ns: int | None
    chatter_threshold_ns: int
    glitch_floor_ns: int
    resolution_ns: int
    normally_closed: frozenset[int]
    form_c: tuple[tuple[int, int], ...]
    mode: str
    lateness_ns: int
    max_pending_edges: int

    def __init__(
        self,
        settle_ns: int = 10_000_000,
        quiet_ns: int | None = None,
        chatter_threshold_ns: int = DEFAULT_CHATTER_THRESHOLD_NS,
        glitch_floor_ns: int = 0,
        resolution_ns: int = 1,
        normally_closed: Iterable[int] = frozenset(),
        form_c: Iterable[tuple[int, int]] = (),
        mode: str = "auto",
        lateness_ns: int = 200_000_000,
        max_pending_edges: int = 1_000_000,
    ) -> None:
        _set = object.__setattr__
        _set(self, "settle_ns", settle_ns)
        _set(self, "quiet_ns", quiet_ns)
        _set(self, "chatter_threshold_ns", chatter_threshold_ns)
        _set(self, "glitch_floor_ns", glitch_floor_ns)
        _set(self, "resolution_ns", resolution_ns)
        _set(self, "normally_closed", frozenset(int(c) for c in normally_closed))
        _set(self, "form_c", tuple((int(a), int(b)) for a, b in form_c))
        _set(self, "mode", mode)
        _set(self, "lateness_ns", lateness_ns)
        _set(self, "max_pending_edges", max_pending_edges)
        self._check()

    def _check(self) -> None:
        for name in ("settle_ns", "chatter_threshold_ns", "resolution_ns"):
            if int(getattr(self, name)) <= 0:
                raise ConfigError(f"analysis setting {name} must be > 0, got {getattr(self, name)}")
        if int(self.max_pending_edges) < 1:
            raise ConfigError(
                f"analysis setting max_pending_edges must be >= 1, got {self.max_pending_edges}"
            )
        for name in ("glitch_floor_ns", "lateness_ns"):
            if int(getattr(self, name)) < 0:
                raise ConfigError(f"analysis setting {name} must be >= 0, got {getattr(self, name)}")
        if self.quiet_ns is not None and int(self.quiet_ns) <= 0:
            raise ConfigError(f"analysis setting quiet_ns must be > 0, got {self.quiet_ns}")
        if self.mode not in MODES:
            raise ConfigError(f"analysis setting mode must be one of {', '.join(MODES)}, got {self.mode!r}")
        seen: set[int] = set()
        for a, b in self.form_c:
            if a == b or a in seen or b in seen:
                raise ConfigError(f"form C pair ({a}, {b}) repeats a channel")
            seen.update((a, b))
            if a in self.normally_closed:
                raise ConfigError(f"form C pair ({a}, {b}): channel {a} is the normally-open member")
        for c in seen | set(self.normally_closed):
            if not 0 <= c <= 15:
                raise ConfigError(f"channel {c} out of range 0-15")

    @property
    def quiet(self) -> int:
        return int(self.quiet_ns if self.quiet_ns is not None else self.settle_ns)

    @property
    def floor(self) -> int:
        """Pulses shorter than this are glitches."""
        return max(int(self.resolution_ns), int(self.glitch_floor_ns))

    def is_normally_closed(self, channel: int) -> bool:
        return channel in self.normally_closed or any(b == channel for _, b in self.form_c)

    def partner(self, channel: int) -> int | None:
        for a, b in self.form_c:
            if channel == a:
                return b
            if channel == b:
                return a
        return None

    def with_(self, **changes: object) -> AnalysisSettings:
        return self._replace(**changes)

    @classmethod
    def from_us(
        cls,
        *,
        settle_us: float = 10_000.0,
        quiet_us: float | None = None,
        chatter_threshold_us: float = DEFAULT_CHATTER_THRESHOLD_NS / 1000,
        glitch_floor_us: float = 0.0,
        resolution_us: float = 0.001,
        normally_closed: Iterable[int] = (),
        form_c: Iterable[tuple[int, int]] = (),
        mode: str = "auto",
    ) -> AnalysisSettings:
        """The same settings in microseconds, which is how people think of them in a notebook."""
        return cls(
            settle_ns=round(settle_us * 1000),
            quiet_ns=None if quiet_us is None else round(quiet_us * 1000),
            chatter_threshold_ns=round(chatter_threshold_us * 1000),
            glitch_floor_ns=round(glitch_floor_us * 1000),
            resolution_ns=max(1, round(resolution_us * 1000)),
            normally_closed=frozenset(normally_closed),
            form_c=tuple(form_c),
            mode=mode,
        )


# key: (field, scale to ns, largest sensible value in the key's unit). The ranges are common
# practice, no source: bounce lasts microseconds to tens of milliseconds, a sampler resolves
# microseconds, a bench cycles at most tens of times a second; a value beyond is a typing slip.
_SETTINGS_KEYS = {
    "settle_ms": ("settle_ns", 1e6, 1_000.0),
    "quiet_ms": ("quiet_ns", 1e6, 10_000.0),
    "chatter_threshold_us": ("chatter_threshold_ns", 1e3, 100_000.0),
    "glitch_floor_us": ("glitch_floor_ns", 1e3, 1_000.0),
    "resolution_us": ("resolution_ns", 1e3, 10_000.0),
    "lateness_ms": ("lateness_ns", 1e6, 60_000.0),
}


def load_settings(path: str, base: AnalysisSettings | None = None) -> AnalysisSettings:
    """Analysis settings from a TOML file (keys: see `_SETTINGS_KEYS`, `normally_closed`, `form_c`, `mode`).

    Problems are ConfigErrors naming the file, the key and what was expected.
    """
    import tomllib

    try:
        with open(path, "rb") as fh:
            doc = tomllib.load(fh)
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read the settings file ({exc.strerror or exc})") from exc
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from exc
    doc = doc.get("analysis", doc)
    changes: dict[str, object] = {}
    allowed = set(_SETTINGS_KEYS) | {"normally_closed", "form_c", "mode"}
    for key, value in doc.items():
        if key not in allowed:
            raise ConfigError(f"{path}: {key}: unknown key (expected one of {', '.join(sorted(allowed))})")
        if key in _SETTINGS_KEYS:
            field_name, scale, hi = _SETTINGS_KEYS[key]
            if isinstance(value, bool) or not isinstance(value, int | float) or not 0 <= value <= hi:
                raise ConfigError(f"{path}: {key}: expected a number from 0 to {hi:g}, got {value!r}")
            changes[field_name] = (
                max(1, round(value * scale)) if field_name == "resolution_ns" else round(value * scale)
            )
        elif key == "normally_closed":
            if not isinstance(value, list) or not all(
                isinstance(c, int) and not isinstance(c, bool) for c in value
            ):
                raise ConfigError(
                    f"{path}: normally_closed: expected a list of channel numbers, got {value!r}"
                )
            changes["normally_closed"] = frozenset(value)
        elif key == "form_c":
            ok = isinstance(value, list) and all(
                isinstance(p, list) and len(p) == 2 and all(isinstance(c, int) for c in p) for p in value
            )
            if not ok:
                raise ConfigError(
                    f"{path}: form_c: expected a list of [normally_open, normally_closed] channel pairs, "
                    f"got {value!r}"
                )
            changes["form_c"] = tuple((p[0], p[1]) for p in value)
        else:
            changes["mode"] = value
    try:
        return (base or AnalysisSettings()).with_(**changes)
    except ConfigError as exc:
        raise ConfigError(f"{path}: {exc}") from exc
