"""``python -m seqdist``: the command line."""

from seqdist.cli import run

run()
