"""``python -m seqdist.cli``: the command line."""

from seqdist.cli import run

run()
