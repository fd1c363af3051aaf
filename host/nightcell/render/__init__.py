"""Rendering: figures, self-contained HTML and CSV files from results.

Never opens the database or a port, and never imports the commands or the tasks.
"""
