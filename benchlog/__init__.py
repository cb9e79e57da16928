"""benchlog: record, measure and qualify mechanical switches and relays on a sampler bench.

The package is split by stage of the data flow (see DEVELOPERS.md): `wire` (bytes to records),
`clock` (sampler ticks to time), `link` (serial ports), `analysis` (edges to actuations), `store`
(the database), `stats` (qualification), `design` (debounce designer) and `views` (commands,
dashboard, reports, exports). A lower stage never imports a higher one.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
