"""Benchmarks, outside the library's import path: ``python -m pondsim.benchmarks.engine``
and ``python -m pondsim.benchmarks.screen``."""
