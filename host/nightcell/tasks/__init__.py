"""The tasks: the use cases a command calls (analyse a run, a study, outputs, the demo, deploy, the live view).

Used only by ``cli``. Asks ``store`` for data, ``science`` for numbers and ``render`` for files.
"""
