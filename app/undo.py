"""Undo steps: every edit replaces the whole (immutable) design.

A :class:`DesignStep` holds the design before and after one edit.  Steps with
the same ``merge_key`` in a row merge into one (e.g. the arrow keys on a
slider), so undo goes back to where the gesture started.
"""

from __future__ import annotations

from PySide6.QtGui import QUndoCommand

__all__ = ["DesignStep"]

_MERGE_IDS: dict[str, int] = {}


def _merge_id(key: str | None) -> int:
    if not key:
        return -1
    return _MERGE_IDS.setdefault(key, len(_MERGE_IDS) + 1)


class DesignStep(QUndoCommand):
    """Replace the model's design by ``after``; undo puts ``before`` back.

    Parameters
    ----------
    model : DesignModel
        Owner of the design; it must provide ``_apply(design)``.
    before, after : loopkit.design.Design
    text : str
        Shown in the Edit menu ("Undo Crossover target").
    merge_key : str, optional
        Consecutive steps with the same key merge.
    """

    def __init__(self, model, before, after, text: str, merge_key: str | None = None):
        super().__init__(text)
        self._model = model
        self.before = before
        self.after = after
        self._id = _merge_id(merge_key)

    def id(self) -> int:
        return self._id

    def mergeWith(self, other) -> bool:
        if not isinstance(other, DesignStep) or other.id() != self._id or self._id == -1:
            return False
        self.after = other.after
        return True

    def redo(self) -> None:
        self._model._apply(self.after)

    def undo(self) -> None:
        self._model._apply(self.before)
