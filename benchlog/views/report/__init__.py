"""The HTML qualification report (`benchlog report`): verdict, distributions, trends, Weibull plot,
runs and incidents, the spec used; one self-contained file.

```python
from benchlog.views.report import evaluate, write_report
ev = evaluate("lab.sqlite", "AG-MS5:L1", "VS-505:L1", spec="VS-505")
ev.qualification.outcome          # "pass" / "fail" / "not yet decidable"
write_report("qualification.html", ev)             # or "qualification.pdf" (WeasyPrint)
```
"""

from benchlog.views.report._build import Evaluation, ReportInfo, SignOff, evaluate, write_report
from benchlog.views.report._data import LotData, data_checksum, load_lot, resolve_lot, spec_for
from benchlog.views.report._html import render_report

__all__ = [
    "Evaluation",
    "ReportInfo",
    "SignOff",
    "data_checksum",
    "evaluate",
    "write_report",
    "LotData",
    "load_lot",
    "resolve_lot",
    "spec_for",
    "render_report",
]
