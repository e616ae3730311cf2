"""Exceptions raised by quantize.

Every error a user can cause (a bad file, a bad option value, an image the
pipeline cannot work with) is a :class:`QuantizeError`.  The command line turns
these into a one-line message and exit code 1; anything else is a bug and keeps
its traceback.
"""

from __future__ import annotations

__all__ = ["QuantizeError", "ImageReadError", "PaletteFileError", "OutputError"]


class QuantizeError(Exception):
    """Base class for errors caused by the user's input or settings."""


class ImageReadError(QuantizeError):
    """An image file cannot be read, or holds nothing the pipeline can use.

    The message starts with the file name, then says what is wrong.
    """


class PaletteFileError(QuantizeError):
    """A palette JSON file is missing, malformed or of a foreign format."""


class OutputError(QuantizeError):
    """An output cannot be written (exists, is an input, folder unwritable)."""


class SeparationError(QuantizeError):
    """The separation cannot be made as asked (sizes, order, substrate)."""
