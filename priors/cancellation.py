"""Cooperative cancellation of long computations.

A caller that may give up on a computation (a server whose request timed out, a job
past its time limit) runs it inside :func:`cancel_scope` with a :class:`CancelToken`.
The engine's long loops (Gibbs sweeps, scenario sweeps, candidate fits of the automatic
configuration, backtest origins, simulation steps) call :func:`checkpoint` between
steps; it raises :class:`~priors.errors.WorkCancelled` once the token is cancelled or its
deadline has passed, so the computation stops within one step instead of running on for
minutes after nobody waits for it.

The scope is a context variable: each thread (and asyncio task) sees its own, so
concurrent requests never see each other's tokens, and no process-wide state changes.
Outside any scope :func:`checkpoint` costs one lookup (about 50 ns) and does nothing.

Example
-------
>>> token = CancelToken(deadline_s=30.0)
>>> with cancel_scope(token):
...     checkpoint()  # raises WorkCancelled once token.cancel() ran or 30 s passed
"""

from __future__ import annotations

import contextvars
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager

from .errors import WorkCancelled

__all__ = ["CancelToken", "cancel_scope", "checkpoint"]


class CancelToken:
    """Cancelled by :meth:`cancel` (from any thread), or by itself once ``deadline_s``
    seconds (monotonic clock, from construction) have passed; None: no deadline."""

    def __init__(self, deadline_s: float | None = None) -> None:
        self._event = threading.Event()
        self._deadline = None if deadline_s is None else time.monotonic() + deadline_s
        self.reason = ""

    def cancel(self, reason: str = "the work was cancelled") -> None:
        """Ask the computation to stop at its next checkpoint."""
        if not self._event.is_set():
            self.reason = reason
            self._event.set()

    @property
    def cancelled(self) -> bool:
        """Whether the computation should stop now."""
        if self._event.is_set():
            return True
        if self._deadline is not None and time.monotonic() > self._deadline:
            self.cancel("the work ran past its time limit")
            return True
        return False


_current: contextvars.ContextVar[CancelToken | None] = contextvars.ContextVar(
    "priors_cancel_token", default=None)


@contextmanager
def cancel_scope(token: CancelToken) -> Iterator[CancelToken]:
    """Run the block under ``token``: :func:`checkpoint` inside it raises once the token
    is cancelled. Scopes nest; the innermost token is the one checked."""
    reset = _current.set(token)
    try:
        yield token
    finally:
        _current.reset(reset)


def checkpoint() -> None:
    """Raise :class:`~priors.errors.WorkCancelled` if the current scope's token is
    cancelled; nothing outside a scope."""
    token = _current.get()
    if token is not None and token.cancelled:
        raise WorkCancelled(token.reason)
