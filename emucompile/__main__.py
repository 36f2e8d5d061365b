"""``python -m emucompile`` is the same program as the ``emucompile`` command."""

from emucompile.cli import main

main()
