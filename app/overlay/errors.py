"""Errors raised by the numeric core."""


class OverlayInputError(ValueError):
    """Input the core cannot compute with: non-finite numbers, mismatched shapes, bad options.

    The message says what is wrong and where (the array and index), so that a caller can pass it
    on to whoever sent the data.
    """
