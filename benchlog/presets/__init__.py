"""Simulator presets shipped with benchlog (TOML, read with `benchlog.sim.load_preset`).

Every value in them is invented for the simulator; see docs/simulator.md.
"""
