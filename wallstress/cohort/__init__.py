"""The embedded cohort store: a clinic's yearly exports in one DuckDB file, no server.

:mod:`.store` opens a store (schema version, migrations, a clear message when another process
holds it); :mod:`.exports` reads study lists one file at a time (each mapped by its own headers
and units) with their provenance; :mod:`.imports` adds a file as one transaction (the same file
twice changes nothing; the same study with another value is a conflict, newest export wins);
:mod:`.patients` proposes which identifiers are one patient and applies a clinic's map.
"""
