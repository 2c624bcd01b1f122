"""Zone history: recorded by the daemon in SQLite, read by ``history``, ``report`` and ``tune``."""
