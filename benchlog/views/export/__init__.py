"""Exports from the store: actuations as CSV, raw edges as VCD (IEEE 1364 value change dump), units' lives
as CSV or JSON."""

from ._csv import write_actuations_csv
from ._units import write_units
from ._vcd import write_vcd

__all__ = ["write_actuations_csv", "write_units", "write_vcd"]
