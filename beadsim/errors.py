"""Exception types raised by beadsim.

Every error a user can cause derives from :class:`BeadsimError`, so callers (and
the command line, which maps them to exit status 2) can catch them in one place.
"""


class BeadsimError(Exception):
    """Base class of every error beadsim raises on purpose."""


class InputError(BeadsimError, ValueError):
    """A parameter, file or setting is invalid; the message names it and what is allowed."""


class InstabilityError(BeadsimError, RuntimeError):
    """The dynamics blew up (overstretched bond, non-finite energy); the message names the step.

    Attributes
    ----------
    step : int
        Step count at which the problem was detected.
    """

    def __init__(self, message, step=None):
        super().__init__(message)
        self.step = step


class MinimizationError(BeadsimError, RuntimeError):
    """Energy minimisation did not reach its force tolerance."""


class AnalysisError(BeadsimError, ValueError):
    """A trajectory or time series cannot be analysed as asked (too short, unreadable, no bonds)."""


class CheckpointError(BeadsimError, RuntimeError):
    """A checkpoint cannot be written or read (disk full, truncated, corrupt or unsafe file); the message names the file."""


class OutputError(BeadsimError, RuntimeError):
    """An output file (trajectory, table) cannot be written, for instance because the disk is full.

    The message names the file; what a checkpoint already covers stays intact, so
    the run can continue with ``--resume`` once the cause is removed.
    """
