"""The ``pondsim`` command: ``app`` (parser, main, error handling), ``commands`` (weather,
run, compare and the entry points of the other tools), ``studies`` (outlook, tune),
``common`` (shared helpers)."""

from pondsim.cli.app import main

__all__ = ["main"]
