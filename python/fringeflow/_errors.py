"""Exceptions fringeflow raises. Messages are the command line's one-line
errors (without its ``fringeflow: error:`` prefix)."""


class FringeflowError(Exception):
    """Base class of every fringeflow error."""


class PipelineError(FringeflowError, ValueError):
    """A pipeline file, text or dict is invalid, or cannot be planned
    (the message names the file, line and ``section.key``)."""


class CaptureError(FringeflowError, OSError):
    """A capture file is missing, unreadable or not a valid capture
    (the message starts with its path)."""


class ArrayError(FringeflowError, ValueError):
    """An array handed in has the wrong shape, type or values."""


class SceneError(FringeflowError, ValueError):
    """A simulator scene is invalid."""
