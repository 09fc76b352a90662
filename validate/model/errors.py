"""The model's own error: the data do not allow a result."""

from __future__ import annotations


class ModelError(ValueError):
    """The data do not allow the model to give a result (e.g. a flat line)."""
