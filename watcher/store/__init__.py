"""SQLite state: one database file under ``state_dir``, WAL, one writer (the daemon).

``db.py`` opens connections with the house pragmas; each other module owns its tables:
``history.py`` (runs, verdicts, metrics), ``jobs.py`` (file table and job states),
``outbox.py`` (alert state, messages and per-channel deliveries).
"""
