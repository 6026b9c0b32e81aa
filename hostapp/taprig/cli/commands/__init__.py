"""Subcommand modules; each exposes ``register(subparsers)``."""
