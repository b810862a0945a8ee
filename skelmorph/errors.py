"""Exceptions raised for bad input.

Every problem a user can cause (a wrong file, an empty mask, a bad voxel size)
raises a subclass of :class:`SkelmorphError` with a message that says what was
wrong and what to do about it.  The command line turns these into a one-line
message and exit code 2.
"""

__all__ = ["SkelmorphError", "ImageReadError", "InputError", "SpacingError"]


class SkelmorphError(ValueError):
    """Base class of all errors caused by input that skelmorph cannot use."""


class ImageReadError(SkelmorphError):
    """A file or folder could not be read as an image."""


class InputError(SkelmorphError):
    """An array or mask is unusable (wrong shape, empty, NaN, too large...)."""


class SpacingError(SkelmorphError):
    """A voxel size is missing, non-finite, zero or negative."""
