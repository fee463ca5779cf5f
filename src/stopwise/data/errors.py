"""The one error type of the data layer: bad dataset input, reported as one line."""
from __future__ import annotations

from stopwise.core.errors import SpecError


class DataError(SpecError):
    """Bad dataset, split or preprocessing input; ``str(e)`` is one line."""
