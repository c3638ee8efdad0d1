"""Errors for bad input. The CLI prints their message as one line and exits with status 2."""


class BenchkitInputError(Exception):
    """Base class for every error caused by the user's input (data, spec, parameters)."""


class DataError(BenchkitInputError, ValueError):
    """Bad dataset input; the message names the file, and the row and column where known."""


class SpecError(BenchkitInputError, ValueError):
    """Bad experiment spec; the message starts with the key path, e.g. ``detectors[2].params``."""


class ParamError(BenchkitInputError, ValueError):
    """A detector hyperparameter that is unknown, of the wrong type or out of range."""


class DetectorNotFound(BenchkitInputError, LookupError):
    """No detector of that name is registered."""
