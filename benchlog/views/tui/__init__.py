"""The terminal dashboard (`benchlog dash`): a Textual app over the store, read-only.

```python
from benchlog.views.tui import BenchDashboard
BenchDashboard("benchlog.sqlite").run()
```
Screens: benches and runs, the units of a run, one unit's history, populations side by side; the
data layer (`_data.py`) reads rollups in worker threads. See docs/dashboard.md.
"""

from benchlog.views.tui._app import BenchDashboard
from benchlog.views.tui._source import Problem, StoreSource

__all__ = ["BenchDashboard", "StoreSource", "Problem"]
