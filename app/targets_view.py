"""Loop targets: crossover and phase-margin sliders, network, boost split, and the input-voltage scrub.

A slider drag is a live preview (``DesignModel.preview_targets``) and one undo
step when released; a keyboard or click step is an undo step of its own,
merged with the next steps of the same slider.
"""

from __future__ import annotations

import math

import numpy as np
from PySide6.QtCore import QSignalBlocker, Qt, Signal
from PySide6.QtWidgets import QComboBox, QGridLayout, QHBoxLayout, QLabel, QSlider, QWidget

from loopkit import DesignError, format_value, parse_value
from loopkit.networks import NETWORKS

from .fields import ValueEdit, mark
from .forms import NETWORK_NAMES

__all__ = ["PM_SLIDER_MIN_PX", "TargetsBar", "nice_hz"]

_FC_STEPS = 1000
_PM_SCALE = 1  # slider units per degree: one arrow key or a few pixels of drag is 1 deg
_PM_PAGE_DEG = 5  # Page Up/Down, or a click beside the handle
_PM_RANGE = (20.0, 85.0)
#: The phase-margin slider is at least this wide: about 5 px per degree over its range.
PM_SLIDER_MIN_PX = 5 * int(_PM_RANGE[1] - _PM_RANGE[0])
_SPLIT_RANGE = (5, 95)  # percent


def nice_hz(f_hz: float) -> float:
    """A target frequency rounded to three significant digits (what a slider or marker sets)."""
    return float(f"{f_hz:.3g}")


class TargetsBar(QWidget):
    """Sliders and fields for the loop targets, and the input-voltage scrub.

    Signals
    -------
    network_chosen(str)
        The network picked in the combo box (so the form can show its rows).
    """

    network_chosen = Signal(str)

    def __init__(self, model, parent=None):
        super().__init__(parent)
        self._model = model
        self._fc_lo, self._fc_hi = 10.0, 1e5
        self._drag_start_fc = None
        self._drag_start_pm = None
        self._drag_start_split = None
        grid = QGridLayout(self)
        grid.setContentsMargins(6, 2, 6, 2)
        grid.setHorizontalSpacing(6)
        grid.setVerticalSpacing(2)

        self.network = QComboBox()
        self.network.setObjectName("compensator.network")
        for n in NETWORKS:
            self.network.addItem(NETWORK_NAMES[n], n)
        self.network.setSizeAdjustPolicy(QComboBox.AdjustToContents)  # every network's name in full
        self.network.activated.connect(self._on_network_activated)

        self.fc_slider = QSlider(Qt.Horizontal)
        self.fc_slider.setObjectName("fc_slider")
        self.fc_slider.setRange(0, _FC_STEPS)
        self.fc_slider.setToolTip("Crossover target (log scale); drag, or use the arrow keys")
        self.fc_edit = ValueEdit("compensator.fc", "Hz")
        self.fc_edit.setFixedWidth(78)
        self.fc_edit.set_help("Crossover target, e.g. 40k or 40kHz")

        self.pm_slider = QSlider(Qt.Horizontal)
        self.pm_slider.setObjectName("pm_slider")
        self.pm_slider.setRange(int(_PM_RANGE[0] * _PM_SCALE), int(_PM_RANGE[1] * _PM_SCALE))
        self.pm_slider.setSingleStep(_PM_SCALE)
        self.pm_slider.setPageStep(_PM_PAGE_DEG * _PM_SCALE)
        self.pm_slider.setTickPosition(QSlider.TicksBelow)
        self.pm_slider.setTickInterval(_PM_PAGE_DEG * _PM_SCALE)
        self.pm_slider.setToolTip(f"Phase-margin target at the design corner, {_PM_RANGE[0]:g}-{_PM_RANGE[1]:g}°: "
                                  f"1° per arrow key, {_PM_PAGE_DEG}° per Page Up/Down (ticks every "
                                  f"{_PM_PAGE_DEG}°); type any other value in the box")
        self.pm_edit = ValueEdit("compensator.pm", "", plain=True)
        self.pm_edit.setFixedWidth(78)
        self.pm_edit.set_help("Phase-margin target, degrees")

        self.split_label = QLabel("Boost split")
        self.split_slider = QSlider(Qt.Horizontal)
        self.split_slider.setObjectName("split_slider")
        self.split_slider.setRange(*_SPLIT_RANGE)
        self.split_slider.setToolTip("Type III: share of the phase boost placed by the zero pair (rest: pole pair)")
        self.split_value = QLabel()
        self.split_value.setFixedWidth(34)

        self.vin_slider = QSlider(Qt.Horizontal)
        self.vin_slider.setObjectName("vin_slider")
        self.vin_slider.setToolTip("Highlight the corners at one input voltage (leftmost: none)")
        self.vin_value = QLabel()
        self.vin_value.setFixedWidth(78)
        for s in (self.fc_slider, self.vin_slider):
            s.setMinimumWidth(120)
        self.split_slider.setMinimumWidth(60)
        self.pm_slider.setMinimumWidth(PM_SLIDER_MIN_PX)
        self.split_label.setToolTip(self.split_slider.toolTip())

        # row 0: the network and (Type III) the boost split; then one full-width row per slider
        top = QHBoxLayout()
        top.setSpacing(6)
        top.addWidget(self.network)
        top.addSpacing(12)
        top.addWidget(self.split_label)
        top.addWidget(self.split_slider, 1)
        top.addWidget(self.split_value)
        grid.addWidget(QLabel("Network"), 0, 0)
        grid.addLayout(top, 0, 1, 1, 2)
        grid.addWidget(QLabel("Crossover target"), 1, 0)
        grid.addWidget(self.fc_slider, 1, 1)
        grid.addWidget(self.fc_edit, 1, 2)
        grid.addWidget(QLabel("Phase margin (°)"), 2, 0)
        grid.addWidget(self.pm_slider, 2, 1)
        grid.addWidget(self.pm_edit, 2, 2)
        grid.addWidget(QLabel("Highlight Vin"), 3, 0)
        grid.addWidget(self.vin_slider, 3, 1)
        grid.addWidget(self.vin_value, 3, 2)
        grid.setColumnStretch(1, 1)

        for slider in (self.fc_slider, self.pm_slider, self.split_slider):
            slider.sliderPressed.connect(model.begin_preview)
        self.fc_slider.valueChanged.connect(self._on_fc_slider_changed)
        self.fc_slider.sliderReleased.connect(self._on_fc_slider_released)
        self.pm_slider.valueChanged.connect(self._on_pm_slider_changed)
        self.pm_slider.sliderReleased.connect(self._on_pm_slider_released)
        self.split_slider.valueChanged.connect(self._on_split_slider_changed)
        self.split_slider.sliderReleased.connect(self._on_split_slider_released)
        self.vin_slider.valueChanged.connect(self._on_vin_slider_changed)
        self.fc_edit.edited.connect(self._on_fc_edited)
        self.pm_edit.edited.connect(self._on_pm_edited)

        model.design_changed.connect(self._on_design_changed)
        model.targets_changed.connect(self._on_targets_changed)
        model.highlight_changed.connect(self._on_highlight_changed)
        model.field_invalid.connect(self._on_field_invalid)
        model.field_valid.connect(self._on_field_valid)
        self._on_design_changed(model.design)
        self._on_targets_changed(model.targets)

    # ------------------------------------------------------------------ slider <-> Hz (log scale)
    def fc_to_slider(self, f_hz: float) -> int:
        if not (f_hz > 0):
            return 0
        t = math.log(f_hz / self._fc_lo) / math.log(self._fc_hi / self._fc_lo)
        return round(min(max(t, 0.0), 1.0) * _FC_STEPS)

    def slider_to_fc(self, pos: int) -> float:
        return nice_hz(self._fc_lo * (self._fc_hi / self._fc_lo) ** (pos / _FC_STEPS))

    # ------------------------------------------------------------------ model -> widgets
    def _on_design_changed(self, design) -> None:
        fsw = design.stage.fsw
        self._fc_lo, self._fc_hi = fsw / 2000.0, fsw / 2.5
        vins = sorted(set(design.operating.vin))
        with QSignalBlocker(self.vin_slider):
            self.vin_slider.setRange(0, len(vins))
            self.vin_slider.setValue(0)
        self._vins = vins
        self.vin_value.setText("none")
        self._on_targets_changed(self._model.targets)

    def _on_targets_changed(self, t) -> None:
        if self.network.currentData() != t.network or self.network.property("invalid"):
            with QSignalBlocker(self.network):
                self.network.setCurrentIndex(max(self.network.findData(t.network), 0))
            mark(self.network, None)
        if not self.fc_slider.isSliderDown():
            with QSignalBlocker(self.fc_slider):
                self.fc_slider.setValue(self.fc_to_slider(t.fc_hz))
        if not self.pm_slider.isSliderDown():
            with QSignalBlocker(self.pm_slider):
                self.pm_slider.setValue(round(t.pm_deg * _PM_SCALE))
        if not self.split_slider.isSliderDown():
            with QSignalBlocker(self.split_slider):
                self.split_slider.setValue(round(t.boost_split * 100))
        for edit, value in ((self.fc_edit, t.fc_hz), (self.pm_edit, t.pm_deg)):
            if edit.value_shown != value or edit.invalid:
                with QSignalBlocker(edit):
                    edit.set_value(value)
        self.split_value.setText(f"{t.boost_split:.0%}")
        type3 = t.network == "type3"
        if self.split_slider.isEnabled() != type3:
            for w in (self.split_label, self.split_slider, self.split_value):
                w.setEnabled(type3)

    def _on_highlight_changed(self, corners) -> None:
        if not corners:
            with QSignalBlocker(self.vin_slider):
                self.vin_slider.setValue(0)
            self.vin_value.setText("none")

    def _on_field_invalid(self, field: str, message: str) -> None:
        for w in (self.fc_edit, self.pm_edit):
            if field == w.key:
                w.mark_invalid(message)
        if field == "compensator.network":
            mark(self.network, message)

    def _on_field_valid(self, field: str) -> None:
        for w in (self.fc_edit, self.pm_edit):
            if field == w.key:
                w.mark_valid()

    # ------------------------------------------------------------------ widgets -> model
    def _on_network_activated(self, index: int) -> None:
        network = self.network.itemData(index)
        self.network_chosen.emit(network)
        self._model.set_targets(f"Network: {NETWORK_NAMES[network]}", network=network)

    def _on_fc_slider_changed(self, pos: int) -> None:
        fc = self.slider_to_fc(pos)
        if self.fc_slider.isSliderDown():
            self._model.preview_targets(fc_hz=fc)
        else:
            self._model.set_targets(f"Crossover target {format_value(fc, 'Hz')}", "fc", fc_hz=fc)

    def _on_fc_slider_released(self) -> None:
        self._model.end_preview(f"Crossover target {format_value(self._model.targets.fc_hz, 'Hz')}")

    def _on_pm_slider_changed(self, pos: int) -> None:
        pm = pos / _PM_SCALE
        if self.pm_slider.isSliderDown():
            self._model.preview_targets(pm_deg=pm)
        else:
            self._model.set_targets(f"Phase-margin target {pm:g}°", "pm", pm_deg=pm)

    def _on_pm_slider_released(self) -> None:
        self._model.end_preview(f"Phase-margin target {self._model.targets.pm_deg:g}°")

    def _on_split_slider_changed(self, pos: int) -> None:
        split = pos / 100.0
        self.split_value.setText(f"{split:.0%}")
        if self.split_slider.isSliderDown():
            self._model.preview_targets(boost_split=split)
        else:
            self._model.set_targets(f"Boost split {split:.0%}", "split", boost_split=split)

    def _on_split_slider_released(self) -> None:
        self._model.end_preview(f"Boost split {self._model.targets.boost_split:.0%}")

    def _on_fc_edited(self, key: str, text: str) -> None:
        try:
            fc = parse_value(text, "compensator.fc", "Hz")
        except DesignError as exc:
            self.fc_edit.mark_invalid(str(exc))
            return
        self._model.set_targets(f"Crossover target {format_value(fc, 'Hz')}", fc_hz=fc)

    def _on_pm_edited(self, key: str, text: str) -> None:
        try:
            pm = parse_value(text, "compensator.pm", "deg")
        except DesignError as exc:
            self.pm_edit.mark_invalid(str(exc))
            return
        self._model.set_targets(f"Phase-margin target {pm:g}°", pm_deg=pm)

    def _on_vin_slider_changed(self, pos: int) -> None:
        if pos == 0:
            self.vin_value.setText("none")
            self._model.set_highlight(())
            return
        v = self._vins[pos - 1]
        vin, _ = self._model.design.operating.corners()
        corners = np.nonzero(vin == v)[0]
        self.vin_value.setText(f"Vin {format_value(v, 'V')}")
        self._model.set_highlight(corners)
