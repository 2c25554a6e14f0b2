"""Errors raised by the science core.

The core knows nothing of Processing parameters, but it knows which *input* was wrong. Each error
carries the name of that input (``parameter``), using the algorithms' UPPER_SNAKE parameter names
where one exists, so the Processing layer can turn it into a message that names the parameter,
says what is wrong and what to do.
"""

from __future__ import annotations


class ChannelHabitatError(ValueError):
    """Bad input detected by the core. ``str(err)`` says what is wrong and what to do."""

    def __init__(self, message: str, parameter: str | None = None):
        super().__init__(message)
        self.parameter = parameter


class Cancelled(RuntimeError):
    """Raised by a progress callback when the user cancelled; nothing must be left half-written."""


class Progress:
    """Progress reporting and cancellation for long core loops.

    Core functions take ``progress: Progress | None``. Call ``progress(fraction, message)`` with a
    fraction in [0, 1]; it raises :class:`Cancelled` when the user asked to stop. ``sub(a, b)``
    returns a progress that maps [0, 1] onto [a, b] of this one, for nested steps.
    """

    def __init__(self, callback=None, cancelled=None, start: float = 0.0, end: float = 1.0):
        self._callback = callback
        self._cancelled = cancelled
        self._start = start
        self._end = end

    def __call__(self, fraction: float, message: str | None = None) -> None:
        if self._cancelled is not None and self._cancelled():
            raise Cancelled("cancelled by the user")
        if self._callback is not None:
            f = self._start + (self._end - self._start) * min(max(fraction, 0.0), 1.0)
            self._callback(f, message)

    def check(self) -> None:
        """Raise :class:`Cancelled` if the user asked to stop (no progress update)."""
        if self._cancelled is not None and self._cancelled():
            raise Cancelled("cancelled by the user")

    def sub(self, a: float, b: float) -> Progress:
        span = self._end - self._start
        return Progress(self._callback, self._cancelled, self._start + span * a, self._start + span * b)


def as_progress(progress: Progress | None) -> Progress:
    """A usable Progress even when the caller passed None."""
    return progress if progress is not None else Progress()
