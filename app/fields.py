"""Input widgets that speak engineering notation and show loopkit's messages.

Each widget carries the design-file key it edits (``stage.fsw``) and emits
``edited(key, value)`` only when the user really changed it.  The model checks
the value; a rejection comes back as :meth:`mark_invalid` with the message.
"""

from __future__ import annotations

import re

from PySide6.QtCore import Signal
from PySide6.QtWidgets import QCheckBox, QComboBox, QLineEdit, QSpinBox

from loopkit import format_value, parse_value

__all__ = ["ChoiceBox", "CountBox", "FlagBox", "ListEdit", "ValueEdit", "exact_text", "mark", "plain_text"]

_INVALID_STYLE = "border: 2px solid #c0392b; border-radius: 3px; background: #fdecea;"


def exact_text(value: float, unit: str = "") -> str:
    """Shortest engineering text (with unit) that reads back as exactly ``value``."""
    for digits in range(3, 16):
        text = format_value(value, unit, digits=digits)
        try:
            if parse_value(text, unit=None) == value:
                return text
        except ValueError:
            break
    return repr(float(value))


def plain_text(value: float) -> str:
    """A plain decimal (for ratios, duty cycles and degrees) that reads back exactly."""
    for digits in range(3, 18):
        text = f"{value:.{digits}g}"
        if float(text) == value:
            return text
    return repr(float(value))


def mark(widget, message: str | None) -> None:
    """Red border and tooltip with ``message``; ``None`` clears the mark."""
    if message:
        if widget.styleSheet() != _INVALID_STYLE:
            widget.setStyleSheet(_INVALID_STYLE)
        widget.setToolTip(message)
        widget.setProperty("invalid", True)
    else:
        if widget.styleSheet():  # setting a style sheet re-polishes the widget: only on a change
            widget.setStyleSheet("")
        widget.setToolTip(widget.property("help") or "")
        widget.setProperty("invalid", False)


class _Keyed:
    key: str

    def mark_invalid(self, message: str) -> None:
        mark(self, message)

    def mark_valid(self) -> None:
        mark(self, None)

    @property
    def invalid(self) -> bool:
        return bool(self.property("invalid"))

    def set_help(self, text: str) -> None:
        self.setProperty("help", text)
        if not self.invalid:
            self.setToolTip(text)


class ValueEdit(QLineEdit, _Keyed):
    """One number in engineering notation, e.g. ``4.7u`` or ``400kHz``.

    Parameters
    ----------
    key : str
        Design-file key, e.g. ``"stage.inductance"``.
    unit : str
        Unit shown after the value (``"H"``, ``"Hz"``, ``"Ω"``...); empty for plain numbers.
    """

    edited = Signal(str, object)

    def __init__(self, key: str, unit: str = "", parent=None, plain: bool = False, zero_text: str = ""):
        super().__init__(parent)
        self.key = key
        self.unit = unit
        self.plain = plain
        self.zero_text = zero_text
        self.value_shown = None
        self._shown = ""
        self.setObjectName(key)
        self.setMinimumWidth(56)
        if zero_text:
            self.setPlaceholderText(zero_text)
        self.editingFinished.connect(self._on_editing_finished)

    def set_value(self, value: float) -> None:
        """Show ``value`` (SI) and clear any mark; 0 shows as empty where ``zero_text`` names its meaning."""
        if value == 0 and self.zero_text:
            self.clear_value()
            self.value_shown = value
            return
        if value == self.value_shown and self.text() == self._shown and not self.invalid:
            return  # already shown (the form is refreshed whole on every design change)
        self.value_shown = value
        self._shown = plain_text(value) if self.plain else exact_text(value, self.unit)
        self.setText(self._shown)
        self.setCursorPosition(0)
        self.mark_valid()

    def clear_value(self) -> None:
        """Show no value (an optional field left empty) and clear any mark."""
        self.value_shown = None
        self._shown = ""
        self.setText("")
        self.mark_valid()

    def _on_editing_finished(self) -> None:
        text = self.text().strip()
        if text == self._shown and not self.invalid:
            return
        if not text and self.zero_text:
            text = "0"
        self.edited.emit(self.key, text)


class ListEdit(QLineEdit, _Keyed):
    """A list of values separated by commas, e.g. ``18, 24, 32`` (V)."""

    edited = Signal(str, object)

    def __init__(self, key: str, unit: str = "", parent=None):
        super().__init__(parent)
        self.key = key
        self.unit = unit
        self._shown = ""
        self.setObjectName(key)
        self.editingFinished.connect(self._on_editing_finished)

    def set_values(self, values) -> None:
        self._shown = ", ".join(exact_text(v, "") for v in values)
        self.setText(self._shown)
        self.mark_valid()

    def items(self) -> list[str]:
        return [t for t in re.split(r"[,;\s]+", self.text().strip()) if t]

    def _on_editing_finished(self) -> None:
        if self.text().strip() == self._shown and not self.invalid:
            return
        self.edited.emit(self.key, self.items())


class ChoiceBox(QComboBox, _Keyed):
    """A fixed choice; items are (shown text, value written to the design)."""

    edited = Signal(str, object)

    def __init__(self, key: str, choices, parent=None):
        super().__init__(parent)
        self.key = key
        self.setObjectName(key)
        for text, value in choices:
            self.addItem(text, value)
        self.activated.connect(self._on_activated)

    def set_choice(self, value) -> None:
        i = self.findData(value)
        if i >= 0:
            self.setCurrentIndex(i)
        self.mark_valid()

    def value(self):
        return self.currentData()

    def _on_activated(self, index: int) -> None:
        self.edited.emit(self.key, self.itemData(index))


class CountBox(QSpinBox, _Keyed):
    """A whole number (capacitor count, number of points)."""

    edited = Signal(str, object)

    def __init__(self, key: str, lo: int = 1, hi: int = 1000, parent=None):
        super().__init__(parent)
        self.key = key
        self.setObjectName(key)
        self.setRange(lo, hi)
        self.setKeyboardTracking(False)
        self.valueChanged.connect(self._on_value_changed)

    def set_count(self, n: int) -> None:
        self.setValue(int(n))
        self.mark_valid()

    def _on_value_changed(self, n: int) -> None:
        self.edited.emit(self.key, int(n))


class FlagBox(QCheckBox, _Keyed):
    """An on/off setting."""

    edited = Signal(str, object)

    def __init__(self, key: str, text: str, parent=None):
        super().__init__(text, parent)
        self.key = key
        self.setObjectName(key)
        self.toggled.connect(self._on_toggled)

    def set_flag(self, on: bool) -> None:
        self.setChecked(bool(on))
        self.mark_valid()

    def _on_toggled(self, on: bool) -> None:
        self.edited.emit(self.key, bool(on))
