"""nightcell firmware core: sampler, journal, link answerer and main loop (MicroPython, CPython-compatible subset).

Owns everything that runs on the board except the hardware itself, which a board profile passes in
(see ``boards/``). Never imports the host package and never writes to stdout except through the answerer.

Usage (what ``main.py`` and ``sim_main.py`` do)::

    from nightcell_fw.logger import Logger
    Logger(board, root="/nc").run()
"""

VERSION = "0.1.0"
