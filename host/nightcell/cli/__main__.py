"""``python -m nightcell.cli``: the same as the ``nightcell`` command."""

import sys

from . import main

main(sys.argv[1:])
