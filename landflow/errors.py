"""Exceptions raised by landflow.

Every error a user can cause is a :class:`LandflowError`. The subclasses also
inherit from the matching builtin, so ``except ValueError`` keeps working for
callers who do not know landflow.
"""

__all__ = ["LandflowError", "InputError", "ConfigError", "SolverError"]


class LandflowError(Exception):
    """Root of all landflow errors."""


class InputError(LandflowError, ValueError):
    """A raster, table or array given to landflow is not usable as it is."""


class ConfigError(LandflowError, ValueError):
    """A study file or a setting is wrong: unknown key, wrong type, bad value."""


class SolverError(LandflowError, RuntimeError):
    """A linear solve failed or did not reach its tolerance.

    Attributes
    ----------
    iterations : int or None
        Iterations done before giving up (iterative solvers only).
    residual : float or None
        Relative residual ``||b - A x|| / ||b||`` reached.
    """

    def __init__(self, message, *, iterations=None, residual=None):
        super().__init__(message)
        self.iterations = iterations
        self.residual = residual
