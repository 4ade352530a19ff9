"""One module per ``ohmgraph`` subcommand; each exposes ``register(subparsers)``."""
