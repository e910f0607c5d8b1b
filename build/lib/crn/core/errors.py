"""The exception hierarchy: every error the library raises on purpose."""

from __future__ import annotations

__all__ = ["CRNError", "ModelError", "ExpressionError", "WorkerError"]


class CRNError(Exception):
    """Base class of the errors the library raises for bad input or impossible requests."""


class ModelError(CRNError):
    """A model (file or object) is invalid.

    Parameters
    ----------
    message : str
        What is wrong, with the offending value.
    file : str, optional
        The model file, when the model came from one.
    line : int, optional
        1-based line in the file.
    field : str, optional
        The table or key at fault, for example ``initial.X``.
    """

    def __init__(self, message: str, *, file=None, line=None, field=None):
        self.message = message
        self.file = None if file is None else str(file)
        self.line = line
        self.field = field
        super().__init__(str(self))

    def where(self) -> str:
        parts = []
        if self.file:
            parts.append(self.file if self.line is None else f"{self.file}:{self.line}")
        elif self.line is not None:
            parts.append(f"line {self.line}")
        if self.field:
            parts.append(f"[{self.field}]")
        return " ".join(parts)

    def __str__(self) -> str:
        where = self.where()
        return f"{where}: {self.message}" if where else self.message

    def located(self, *, file=None, line=None, field=None) -> ModelError:
        """Return a copy with missing location parts filled in."""
        return ModelError(
            self.message,
            file=self.file or file,
            line=self.line if self.line is not None else line,
            field=self.field or field,
        )


class ExpressionError(CRNError):
    """An arithmetic expression in a model is not allowed or cannot be evaluated."""


class WorkerError(CRNError):
    """Worker processes kept dying and the work could not be finished (exit status 1).

    Attributes
    ----------
    partial : object or None
        The results that did finish (for an ensemble, an
        :class:`~crn.solvers.simulate.Ensemble` of the finished runs).
    """

    def __init__(self, message: str, partial=None):
        super().__init__(message)
        self.partial = partial
