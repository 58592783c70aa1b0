"""The session journal: an append-only SQLite file that survives a crash or a pulled plug.

``schema`` owns the SQL, ``store`` writes (and opens) a session, ``read`` reads one back,
``sessions`` names and finds the files.
"""
