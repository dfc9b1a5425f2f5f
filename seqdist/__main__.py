"""``python -m seqdist``: the command line (the same as the ``seqdist`` console script)."""

from seqdist.cli import run

if __name__ == "__main__":  # importing this module (documentation tools, test walkers) must not run the CLI
    run()
