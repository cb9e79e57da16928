"""The table of input thresholds (benchlog/presets/thresholds.toml, or a user's file of the same form)."""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from benchlog.errors import ConfigError


@dataclass(frozen=True, slots=True)
class InputThresholds:
    """One kind of input. Volts at `supply`; `ratiometric` rows scale with the supply."""

    name: str
    supply: float
    vt_plus: tuple[float, float]
    vt_minus: tuple[float, float]
    hysteresis_min: float
    ratiometric: bool
    source: str
    pullup_ohms: tuple[float, float] | None = None

    def at_supply(self, vdd: float) -> tuple[tuple[float, float], tuple[float, float]]:
        """(vt_plus, vt_minus) ranges at supply `vdd`."""
        k = vdd / self.supply if self.ratiometric else 1.0
        return (self.vt_plus[0] * k, self.vt_plus[1] * k), (self.vt_minus[0] * k, self.vt_minus[1] * k)


def _pair(row: dict, key: str, where: str, required: bool = True) -> tuple[float, float] | None:
    if key not in row:
        if required:
            raise ConfigError(f"{where}: missing {key} = [min, max]")
        return None
    v = row[key]
    if (
        not isinstance(v, list)
        or len(v) != 2
        or not all(isinstance(x, int | float) for x in v)
        or isinstance(v[0], bool)
        or v[0] > v[1]
        or v[0] < 0
    ):
        raise ConfigError(f"{where}: {key} must be [min, max] with 0 <= min <= max, got {v!r}")
    return float(v[0]), float(v[1])


def parse_thresholds(text: str, origin: str = "thresholds") -> dict[str, InputThresholds]:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{origin}: not valid TOML: {exc}") from exc
    rows = data.get("input")
    if not isinstance(rows, list) or not rows:
        raise ConfigError(f"{origin}: expected one or more [[input]] tables")
    out: dict[str, InputThresholds] = {}
    for i, row in enumerate(rows):
        where = f"{origin}: input #{i + 1}"
        name = row.get("name")
        if not isinstance(name, str) or not name.strip():
            raise ConfigError(f"{where}: missing name")
        where = f"{origin}: input {name!r}"
        supply = row.get("supply")
        if not isinstance(supply, int | float) or isinstance(supply, bool) or supply <= 0:
            raise ConfigError(f"{where}: supply must be a positive number of volts")
        vtp = _pair(row, "vt_plus", where)
        vtm = _pair(row, "vt_minus", where)
        assert vtp is not None and vtm is not None
        if vtp[1] > supply or vtm[1] > supply:
            raise ConfigError(f"{where}: a threshold above the supply {supply} V")
        hyst = row.get("hysteresis_min", 0.0)
        if not isinstance(hyst, int | float) or hyst < 0 or hyst > vtp[1] - vtm[0]:
            raise ConfigError(f"{where}: hysteresis_min must be between 0 and max(vt_plus) - min(vt_minus)")
        source = row.get("source")
        if not isinstance(source, str) or not source.strip():
            raise ConfigError(f"{where}: every row needs a source (a datasheet family, or 'from memory')")
        pull = _pair(row, "pullup_ohms", where, required=False)
        if pull is not None and pull[0] <= 0:
            raise ConfigError(f"{where}: pullup_ohms must be positive")
        out[name] = InputThresholds(
            name, float(supply), vtp, vtm, float(hyst), bool(row.get("ratiometric", False)), source, pull
        )
    return out


def load_thresholds(path: str | Path | None = None) -> dict[str, InputThresholds]:
    """The shipped table, or the file at `path`."""
    if path is None:
        text = resources.files("benchlog").joinpath("presets", "thresholds.toml").read_text("utf-8")
        return parse_thresholds(text, "thresholds.toml")
    p = Path(path)
    try:
        text = p.read_text("utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"cannot read thresholds file {p}: {exc}") from exc
    return parse_thresholds(text, str(p))


def find_input(table: dict[str, InputThresholds], name: str) -> InputThresholds:
    """A row by exact name, or by a case-insensitive fragment matching exactly one row."""
    if name in table:
        return table[name]
    hits = [row for key, row in table.items() if name.lower() in key.lower()]
    if len(hits) == 1:
        return hits[0]
    names = "; ".join(table)
    what = "matches several inputs" if hits else "is not in the table"
    raise ConfigError(f"input {name!r} {what}; known: {names}")
