"""The error a refused review action raises."""

__all__ = ["ReviewError"]


class ReviewError(ValueError):
    """A review action that was refused; the message says why."""
