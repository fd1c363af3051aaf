"""The store: the SQLite database (migrations, immutable raw rows, readable views, results), sync and merge.

The only room that writes SQL or holds a connection. Uses ``wire`` and ``science``; never the terminal or figures.
"""
