"""The simulated sampler: contact physics, the sampler's clock and faults, and a pty server.

- `Bench(config, seed)`: the sampler without I/O; `advance_to(t_ns)` gives records, `encode` bytes,
  `truth` the ground truth (units' lives and failure modes, every actuation, every edge sent).
- `PtySampler(config, ...)`: serves a `Bench` on a pseudo-terminal in a thread; `.path` is the port.
- `load_preset(name)`, `load_config(path)`, `parse_config(text)`: parameters (docs/simulator.md).
"""

from benchlog.sim._bench import SENT_DTYPE, Bench, Truth, run_seconds
from benchlog.sim._config import (
    FAILURE_MODES,
    Autostart,
    Bounce,
    Faults,
    Population,
    SamplerSpec,
    SimConfig,
    Spread,
    Unit,
    load_config,
    load_preset,
    parse_config,
    preset_names,
)
from benchlog.sim._physics import TRUTH_DTYPE, UnitState
from benchlog.sim._pty import PtySampler

__all__ = [
    "Bench",
    "Truth",
    "PtySampler",
    "run_seconds",
    "SENT_DTYPE",
    "TRUTH_DTYPE",
    "UnitState",
    "FAILURE_MODES",
    "Autostart",
    "Bounce",
    "Faults",
    "Population",
    "SamplerSpec",
    "SimConfig",
    "Spread",
    "Unit",
    "load_config",
    "load_preset",
    "parse_config",
    "preset_names",
]
