"""Re-export of :class:`benchkit.errors.DataError` for the data layer."""

from benchkit.errors import DataError

__all__ = ["DataError"]
