"""Stopping a run on SIGINT (Ctrl-C) or SIGTERM: the command line's handlers and the run's checkpoints.

The handler raises at once (``KeyboardInterrupt`` or :class:`Terminated`), so a run stops wherever it is
and cleans up on the way out. Python drops an exception raised while a C library is calling back into
Python (GDAL's error handler in rasterio, a destructor), printing "Exception ignored"; the handler
therefore also records the signal, and :func:`check`, which the run calls before every output and before
it commits, raises again if the first exception was lost.
"""

import signal

__all__ = ["Terminated", "install", "check"]

_requested = []


class Terminated(BaseException):
    """SIGTERM, raised where the program is, so that a run cleans up as on Ctrl-C."""


def _handle(signum, frame):
    _requested.append(signum)
    _raise(signum)


def _raise(signum):
    if signum == signal.SIGINT:
        raise KeyboardInterrupt()
    raise Terminated()


def install():
    """Install the handlers for SIGINT and SIGTERM; returns a function that restores the previous ones."""
    _requested.clear()
    previous = {s: signal.signal(s, _handle) for s in (signal.SIGINT, signal.SIGTERM)}

    def restore():
        for s, handler in previous.items():
            signal.signal(s, handler)
    return restore


def check():
    """Raise if a stop was asked for (when the handler's own exception was dropped on the way)."""
    if _requested:
        _raise(_requested[0])
