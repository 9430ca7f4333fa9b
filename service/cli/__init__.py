"""The ``fanfold`` command line: ``commands.py`` (forecast, fit, backtest, serve, keys),
``planning.py`` (scenario, shocks, reorder) and ``batch.py`` (one model per group)."""

from .commands import main

__all__ = ["main"]
