"""Recording: a sampler's live feed (benchlog.ingest) through the analysis into the store.

- `Recorder(writer, settings=, specs=, fail_after=)`: analysis, life status, batched writes;
  `run(feed, stop, on_progress)` records until the cycle target, every unit failing, or `stop`.
- `EventCommand(argv, timeout_s=)`: the user's command run on each event of a recording, never in its way.
- `LifeJudge`: the failure rule (docs/store.md, "Life status"); `FAILURE_MODES`.
- `UnitAssignment`, `parse_units`, `parse_profile`: the command line's unit and profile forms.
"""

from ._life import FAILURE_MODES, Failure, LifeJudge
from ._notify import EventCommand, Problem, event_env
from ._recorder import Progress, Recorder
from ._setup import Profile, UnitAssignment, parse_profile, parse_units, register_units

__all__ = [
    "Recorder",
    "EventCommand",
    "Problem",
    "event_env",
    "Progress",
    "LifeJudge",
    "Failure",
    "FAILURE_MODES",
    "UnitAssignment",
    "Profile",
    "parse_units",
    "parse_profile",
    "register_units",
]
