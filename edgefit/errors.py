"""One exception hierarchy for edgefit, rooted in :class:`EdgefitError`.

Every error raised because of a user's input is a subclass of
:class:`EdgefitError`, so a command-line front end can catch that single
class and print one line.  Errors about a file carry the file's path and
say what is wrong with it.
"""
from __future__ import annotations

import os

__all__ = [
    "EdgefitError",
    "ArgumentError",
    "MissingDependencyError",
    "InputFileError",
    "MissingFileError",
    "NotFITSError",
    "TruncatedFileError",
    "MissingExtensionError",
    "MissingColumnError",
    "MissingRowError",
    "BadGridError",
    "GridMismatchError",
    "ChannelMismatchError",
    "BadChannelsError",
    "BadScalingError",
    "BadUnitError",
    "BadExposureError",
    "BadCountsError",
    "ConfigError",
    "ModelError",
    "ParameterClashError",
    "UnknownParameterError",
    "PhysicsDataError",
    "FitError",
    "EdgefitWarning",
    "ConvergenceWarning",
    "ShortChainWarning",
    "ModeMixingWarning",
    "PhysicsWarning",
    "InputWarning",
]


class EdgefitError(Exception):
    """Base class of every error edgefit raises on purpose."""


class ArgumentError(EdgefitError, ValueError):
    """A function or method was called with an argument it cannot use (an
    unknown choice, a value out of range, arrays of mismatched lengths) or
    on an object that lacks what the call needs."""


class MissingDependencyError(EdgefitError, ImportError):
    """An optional package was asked for but is not installed: the numba
    accelerator (``backend="numba"``), or matplotlib/corner for plots.  The
    one error type for every such case; the message says what to install."""


class InputFileError(EdgefitError, ValueError):
    """A file given by the user cannot be used.

    Parameters
    ----------
    path : str or os.PathLike
        The offending file.
    problem : str
        What is wrong, phrased so that the user knows what to fix.
    """

    def __init__(self, path, problem: str):
        self.path = os.fspath(path) if path is not None else "<memory>"
        self.problem = problem
        super().__init__(f"{self.path}: {problem}")


class MissingFileError(InputFileError):
    """The file does not exist."""


class NotFITSError(InputFileError):
    """The file is not a FITS file at all."""


class TruncatedFileError(InputFileError):
    """The file ends before its headers say it should."""


class MissingExtensionError(InputFileError):
    """A required HDU (SPECTRUM, SPECRESP, MATRIX, EBOUNDS, ...) is absent."""


class MissingColumnError(InputFileError):
    """A required column or keyword is absent."""


class MissingRowError(InputFileError):
    """A PHA type II file has no row matching the request."""


class BadGridError(InputFileError):
    """An energy or channel grid is not strictly increasing or not finite."""


class GridMismatchError(InputFileError):
    """The energy grids of an ARF and an RMF disagree."""


class ChannelMismatchError(InputFileError):
    """A spectrum and its response have different channel counts."""


class BadChannelsError(InputFileError):
    """A CHANNEL column repeats a channel number."""


class BadScalingError(InputFileError):
    """BACKSCAL or AREASCAL is zero, negative or not finite where a
    background subtraction needs it."""


class BadUnitError(InputFileError):
    """A column's TUNIT is not a unit edgefit can read for that column
    (e.g. an energy column in an unknown unit)."""


class BadExposureError(InputFileError):
    """The exposure is zero, negative or missing."""


class BadCountsError(InputFileError):
    """Counts are NaN, infinite or negative."""


class ConfigError(InputFileError):
    """A configuration file is malformed or names something unknown."""


class ModelError(EdgefitError, ValueError):
    """A model is built or evaluated inconsistently."""


class ParameterClashError(ModelError):
    """Two components of one model would define the same parameter name."""


class UnknownParameterError(ModelError, KeyError):
    """A parameter name that the model does not have."""

    def __str__(self):  # KeyError would otherwise quote the message
        return str(self.args[0]) if self.args else ""


class PhysicsDataError(EdgefitError):
    """Physics data (cross sections, abundances, optical constants) are
    missing or do not cover the requested range."""


class FitError(EdgefitError):
    """A fit failed.  ``partial`` holds whatever had been computed."""

    def __init__(self, message: str, partial=None):
        super().__init__(message)
        self.partial = partial


class EdgefitWarning(UserWarning):
    """Base class of edgefit's warnings."""


class ConvergenceWarning(EdgefitWarning):
    """A fit's convergence is doubtful."""


class ShortChainWarning(EdgefitWarning):
    """An MCMC chain is shorter than about 50 autocorrelation times."""


class ModeMixingWarning(ShortChainWarning):
    """An MCMC chain did not move between the separate minima the fit
    found (or did not pass its split-R-hat / effective-sample-size checks),
    so the relative weight of the modes is not sampled."""


class PriorDominatedWarning(EdgefitWarning):
    """An MCMC posterior is close to its prior in a coordinate the data
    were meant to measure (the dust fraction, say): its credible interval
    describes the prior more than the data."""


class PhysicsWarning(EdgefitWarning):
    """A physically suspect input (e.g. a grain size outside the tables)."""


class InputWarning(EdgefitWarning):
    """An input file is usable but probably not what was meant (e.g. an ARF
    given with a response matrix that already includes the area)."""
