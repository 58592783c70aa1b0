"""The session journal: an append-only SQLite file that survives a crash or a pulled plug.

``schema`` owns the SQL, ``store`` writes a session (``Journal``), ``opening`` makes or opens
its file, ``read`` reads one back, ``errors`` says what went wrong, ``lock`` keeps one process
per session, ``salvage`` reads a damaged one, ``sessions`` names and finds the files.
"""
