"""The firing log: one SQLite file per firing, its writer, its readers and its side files.

:mod:`.writer` is the single writer, :mod:`.reader` the read-only reader (the schema is
``schema.sql``, shared pieces in :mod:`._common`), :mod:`.outbox` the MQTT outbox queries,
:mod:`.view` the dashboard's view of a log (what is true now: live, stale, stopped),
:mod:`.actions` the operator-action queue beside the log. Imports the firing model and
settings; never the services or the interface.
"""
