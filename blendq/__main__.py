"""Run the command line with ``python -m blendq``."""

from blendq.cli import main

main()
