"""One module per sub-command; each provides ``register(subparsers, common)``."""
