"""Settings: the site profile, firing schedules, the line-aware TOML reader and units.

Everything a site writes by hand and firewatch reads: which sensors exist and how they
are set up (:mod:`.profile`), what the firing should do (:mod:`.schedule`), how a TOML
file is read with line numbers for every message (:mod:`._tomlcheck`, :mod:`._tomllines`),
the key tables of the docs written from the same field lists (:mod:`.keydocs`) and the
units people type (:mod:`.units`). Imports only :mod:`firewatch.physics`.
"""
