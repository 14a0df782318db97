"""The design form: power stage, operating range, sensing, modulator, control scheme, compensator.

Every field edits one design-file key through :meth:`DesignModel.edit`; the
model answers with ``field_valid`` / ``field_invalid`` and the field shows
loopkit's message (red border and tooltip).  Widgets are written inside
``QSignalBlocker`` so that showing a design never echoes an edit back.
"""

from __future__ import annotations

from PySide6.QtCore import QSignalBlocker, Qt, Signal
from PySide6.QtWidgets import (
    QFormLayout,
    QGridLayout,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QScrollArea,
    QToolButton,
    QVBoxLayout,
    QWidget,
)

from loopkit.design import SCHEMES, TOPOLOGIES
from loopkit.networks import NETWORKS, network_module, network_title
from loopkit.powerstage import corner_label
from loopkit.schemes import scheme_module

from .fields import ChoiceBox, CountBox, FlagBox, ListEdit, ValueEdit

__all__ = ["NETWORK_NAMES", "TOPOLOGY_NAMES", "DesignForm"]

TOPOLOGY_NAMES = {
    "buck": "Buck",
    "boost": "Boost",
    "inverting-buck-boost": "Inverting buck-boost",
    "four-switch-buck-boost": "Four-switch buck-boost",
    "flyback": "Flyback",
}
#: Each network's title, from its own module.
NETWORK_NAMES = {name: network_title(name) for name in NETWORKS}
#: The sense gain filled in when the user switches to current mode and the design has none: a
#: starting value to edit (0.1 ohm: a 10 mohm shunt with a gain-of-10 amplifier), not a recommendation.
DEFAULT_SENSE_GAIN_OHM = 0.1
#: PWM counts per period a design gets when the digital scheme is chosen (8 bits; common practice, no source).
DEFAULT_PWM_COUNTS = 256
#: The [digital] fields in the form, shown with the digital scheme.
DIGITAL_KEYS = ("digital.pwm_clock", "digital.adc_bits", "digital.adc_range", "digital.anti_alias",
                "digital.computation_delay", "digital.update", "digital.carrier", "digital.sample_ratio",
                "digital.dither_bits", "digital.form", "digital.method")
_NOTATION = "Engineering notation: 4.7u, 400k, 2m2, 0.5 (a unit may follow: 400kHz, 22uF)"


class DesignForm(QScrollArea):
    """All design fields, grouped; views the model and edits it.

    Signals
    -------
    message(str)
        Text for the status bar (the last rejection, or an empty string).
    """

    message = Signal(str)

    def __init__(self, model, parent=None):
        super().__init__(parent)
        self._model = model
        self._widgets: dict[str, QWidget] = {}
        self._labels: dict[str, str] = {}
        self._rows: dict[str, tuple[QFormLayout, QWidget]] = {}
        self.setWidgetResizable(True)
        self.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        body = QWidget()
        self._layout = QVBoxLayout(body)
        self._layout.setContentsMargins(6, 6, 6, 6)
        self._layout.setSpacing(8)
        self.setWidget(body)
        self.error_strip = QLabel()
        self.error_strip.setObjectName("form_error")
        self.error_strip.setWordWrap(True)
        self.error_strip.setStyleSheet("background: #fdecea; color: #8a1c0c; border: 1px solid #e6a39a;"
                                       " border-radius: 3px; padding: 4px;")
        self.error_strip.setVisible(False)
        self._layout.addWidget(self.error_strip)
        self._build()
        self._layout.addStretch(1)
        model.design_changed.connect(self._on_design_changed)
        model.targets_changed.connect(self._on_targets_changed)
        model.field_invalid.connect(self._on_field_invalid)
        model.field_valid.connect(self._on_field_valid)
        self._on_design_changed(model.design)
        self._on_targets_changed(model.targets)

    # ------------------------------------------------------------------ building
    def _group(self, title: str) -> QFormLayout:
        box = QGroupBox(title)
        form = QFormLayout(box)
        form.setFieldGrowthPolicy(QFormLayout.AllNonFixedFieldsGrow)
        form.setLabelAlignment(Qt.AlignRight | Qt.AlignVCenter)
        form.setContentsMargins(8, 6, 8, 6)
        form.setVerticalSpacing(4)
        self._layout.addWidget(box)
        return form

    def _add(self, form: QFormLayout, label: str, widget, help_text: str = "") -> None:
        self._widgets[widget.key] = widget
        self._labels[widget.key] = label
        self._rows[widget.key] = (form, widget)
        widget.set_help(help_text)
        widget.edited.connect(self._on_widget_edited)
        form.addRow(label, widget)

    def _value(self, form, key: str, label: str, unit: str, help_text: str = "", plain: bool = False,
               zero_text: str = "") -> ValueEdit:
        w = ValueEdit(key, unit, plain=plain, zero_text=zero_text)
        self._add(form, label, w, f"{help_text}\n{_NOTATION}".strip())
        return w

    def _build(self) -> None:
        f = self._group("Design")
        title = QLineEdit()
        title.setObjectName("title")
        title.editingFinished.connect(self._on_title_edited)
        self._title = title
        f.addRow("Title", title)

        f = self._group("Power stage")
        self._add(f, "Topology", ChoiceBox("stage.topology", [(TOPOLOGY_NAMES[t], t) for t in TOPOLOGIES]),
                  "Converter topology; vout's sign and the input range must suit it")
        self._value(f, "stage.fsw", "Switching frequency", "Hz")
        self._value(f, "stage.inductance", "Inductance", "H", "Flyback: magnetising inductance seen from the primary")
        self._value(f, "stage.dcr", "Inductor DCR", "Ω")
        self._value(f, "stage.r_switch", "Switch on-resistance", "Ω")
        self._add(f, "Rectifier", ChoiceBox("stage.rectifier", [("Synchronous switch", "synchronous"),
                                                                 ("Diode", "diode")]))
        self._value(f, "stage.r_rectifier", "Rectifier resistance", "Ω",
                    "On-resistance of the synchronous switch, or the diode's series resistance")
        self._value(f, "stage.diode_drop", "Diode forward drop", "V")
        self._add(f, "Light load", ChoiceBox("stage.light_load", [("Automatic", ""), ("Enters DCM", "dcm"),
                                                                   ("Forced CCM", "forced-ccm")]),
                  "Whether the inductor current may stop at zero at light load.\nAutomatic: DCM with a diode, "
                  "forced CCM with a synchronous switch")
        self._value(f, "stage.turns_ratio", "Turns ratio Np/Ns", "", plain=True)
        self._value(f, "stage.buck_max_duty", "Buck mode up to duty", "", plain=True)
        self._value(f, "stage.boost_min_duty", "Boost mode from duty", "", plain=True)
        self._caps_box = QWidget()
        self._caps_grid = QGridLayout(self._caps_box)
        self._caps_grid.setContentsMargins(0, 0, 0, 0)
        self._caps_grid.setHorizontalSpacing(4)
        self._caps_grid.setVerticalSpacing(2)
        self._cap_rows: list[tuple] = []
        f.addRow(QLabel("Output capacitor banks (in parallel)"))
        f.addRow(self._caps_box)
        add = QPushButton("Add bank")
        add.setObjectName("add_bank")
        add.clicked.connect(self._model.add_capacitor_bank)
        f.addRow("", add)
        self._caps_form = f

        f = self._group("Operating range")
        self._value(f, "operating.vout", "Output voltage", "V", "Negative for an inverting buck-boost")
        self._add(f, "Input voltages", ListEdit("operating.vin", "V"),
                  "Input voltages of the corners, V, separated by commas (e.g. 18, 24, 32)")
        rng = QWidget()
        h = QHBoxLayout(rng)
        h.setContentsMargins(0, 0, 0, 0)
        h.setSpacing(3)
        self._vin_min = ValueEdit("operating.vin_min", "V")
        self._vin_max = ValueEdit("operating.vin_max", "V")
        self._vin_points = CountBox("operating.vin_points", 1, 1000)
        for w, tip in ((self._vin_min, "Lowest input voltage"), (self._vin_max, "Highest input voltage"),
                       (self._vin_points, "Number of input voltages, evenly spaced")):
            w.set_help(tip)
            self._widgets[w.key] = w
            self._labels[w.key] = "Input spread"
        fill = QToolButton()
        fill.setText("Fill")
        fill.setObjectName("fill_vin")
        fill.setToolTip("Replace the input voltages by an even spread from min to max")
        fill.clicked.connect(self._on_fill_vin)
        for w in (self._vin_min, QLabel("–"), self._vin_max, QLabel("×"), self._vin_points, fill):
            h.addWidget(w)
        self._vin_points.setMaximumWidth(52)
        self._vin_min.setMinimumWidth(48)
        self._vin_max.setMinimumWidth(48)
        f.addRow("Spread", rng)
        self._add(f, "Nominal input", ValueEdit("operating.vin_nominal", "V"),
                  "Reference input for feed-forward (leave empty for none)")
        self._add(f, "Load currents", ListEdit("operating.load", "A"),
                  "Load currents of the corners, A, separated by commas (e.g. 0.3, 3)")
        self._corners_label = QLabel()
        self._corners_label.setStyleSheet("color: #555;")
        self._corners_label.setWordWrap(True)
        f.addRow("", self._corners_label)

        f = self._group("Sensing and modulator")
        self._add(f, "Sensing", ChoiceBox("sensing.kind", [("Resistor divider", "divider"),
                                                            ("Differential amplifier", "differential")]))
        self._value(f, "sensing.reference", "Reference voltage", "V")
        self._value(f, "sensing.r_top", "Top resistor R1", "Ω", "Empty: set by the divider current", zero_text="from divider current")
        self._value(f, "sensing.divider_current", "Divider current", "A")
        self._value(f, "sensing.diff_bandwidth", "Diff. amp bandwidth", "Hz", "Empty: ideal", zero_text="ideal")
        self._value(f, "modulator.ramp", "Ramp (peak-peak)", "V")
        self._value(f, "modulator.max_duty", "Maximum duty", "", plain=True)
        self._add(f, "", FlagBox("modulator.feedforward", "Vin feed-forward"))

        f = self._group("Control scheme")
        self._add(f, "Scheme", ChoiceBox("control.scheme", [(scheme_module(name).TITLE.capitalize(), name)
                                                             for name in SCHEMES]),
                  "Voltage mode (PWM ramp) or peak current mode (the switch turns off at a current threshold)")
        self._value(f, "control.sense_gain", "Current-sense gain", "Ω",
                    "Sense resistance times amplifier gain (flyback: primary current)")
        self._value(f, "control.slope", "Slope compensation", "V/s",
                    "External ramp at the comparator; empty: chosen for Qp = 1 at the worst corner",
                    zero_text="none")
        self._value(f, "control.current_limit", "Peak current limit", "A", "Empty: not checked",
                    zero_text="not checked")
        self._build_digital(f)

        f = self._group("Compensator")
        self._add(f, "Design at", ChoiceBox("compensator.design_corner", [("Worst corner", None)]),
                  "The corner the synthesis places poles and zeros for")
        self._value(f, "compensator.opamp.gain_db", "Op-amp gain (dB)", "", "Empty: ideal", plain=True,
                    zero_text="ideal")
        self._value(f, "compensator.opamp.gbw", "Op-amp GBW", "Hz", "Empty: ideal", zero_text="ideal")
        self._value(f, "compensator.opamp.gm", "Amplifier gm", "S")
        self._value(f, "compensator.opamp.r_out", "Amplifier Ro", "Ω", "Empty: infinite", zero_text="infinite")
        self._value(f, "compensator.opto.ctr", "Optocoupler CTR", "", "Current-transfer ratio (1 = 100 %)", plain=True)
        self._value(f, "compensator.opto.r_pull", "Pull-up resistor", "Ω")
        self._value(f, "compensator.opto.r_led", "LED resistor", "Ω")
        self._value(f, "compensator.opto.c_opto", "Opto capacitance", "F", "0 to neglect its pole")
        self._value(f, "compensator.opto.v_pullup", "Pull-up supply", "V", "Empty: 5 V")
        self._value(f, "compensator.opto.v_pin", "Pin operating voltage", "V", "Empty: 2.5 V")
        self._value(f, "compensator.opto.v_led", "LED forward voltage", "V", "Empty: 1.0 V")
        self._value(f, "compensator.opto.v_shunt_min", "Shunt least cathode", "V", "Empty: 2.5 V (its reference)")
        self._parts_note = QLabel()
        self._parts_note.setWordWrap(True)
        self._parts_note.setObjectName("parts_note")
        self._parts_button = QPushButton()
        self._parts_button.setObjectName("parts_mode")
        self._parts_button.clicked.connect(self._on_parts_mode_clicked)
        f.addRow(self._parts_note)
        f.addRow("", self._parts_button)

    def _build_digital(self, f) -> None:
        """The [digital] fields, shown with the digital scheme."""
        self._value(f, "digital.pwm_clock", "PWM clock", "Hz",
                    "PWM counter clock; counts per period = clock / fsw (high-resolution PWM: its step rate)")
        self._value(f, "digital.adc_bits", "ADC bits", "", plain=True)
        self._value(f, "digital.adc_range", "ADC full scale", "V")
        self._value(f, "digital.anti_alias", "Anti-alias pole", "Hz", "Empty: none", zero_text="none")
        self._value(f, "digital.computation_delay", "Computation delay", "s", "From the sample to the new duty written")
        self._add(f, "Duty update", ChoiceBox("digital.update", [("Next period", "next-period"),
                                                                  ("Immediate", "immediate")]),
                  "When the PWM takes the new duty: at the next period start, or as soon as it is written")
        self._add(f, "PWM carrier", ChoiceBox("digital.carrier", [("Trailing edge", "trailing-edge"),
                                                                   ("Leading edge", "leading-edge"),
                                                                   ("Symmetric triangle", "symmetric")]))
        self._value(f, "digital.sample_ratio", "Samples per period", "", plain=True)
        self._value(f, "digital.dither_bits", "Dither bits", "", "Empty: none", plain=True, zero_text="none")
        self._add(f, "Controller", ChoiceBox("digital.form", [("PI", "pi"), ("PID", "pid"), ("Type III", "type3")]))
        self._add(f, "Design method", ChoiceBox("digital.method", [("Direct in z", "direct"),
                                                                    ("Tustin, prewarped", "tustin"),
                                                                    ("Matched pole-zero", "matched")]),
                  "Direct: designed on the exact sampled loop; the others discretise an analog design")

    # ------------------------------------------------------------------ capacitor rows
    def _rebuild_caps(self, n: int) -> None:
        while len(self._cap_rows) > n:
            row = self._cap_rows.pop()
            for w in row:
                self._widgets.pop(getattr(w, "key", None), None)
                self._caps_grid.removeWidget(w)
                w.hide()
                w.setParent(None)
                w.deleteLater()
        while len(self._cap_rows) < n:
            i = len(self._cap_rows)
            c = ValueEdit(f"stage.output_caps[{i}].capacitance", "F")
            e = ValueEdit(f"stage.output_caps[{i}].esr", "Ω")
            k = CountBox(f"stage.output_caps[{i}].count", 1, 1000)
            k.setPrefix("× ")
            rm = QToolButton()
            rm.setText("−")
            rm.setObjectName(f"remove_bank_{i}")
            rm.setToolTip(f"Remove bank {i + 1}")
            rm.clicked.connect(lambda _=False, i=i: self._model.remove_capacitor_bank(i))
            for w, label, tip in ((c, f"Bank {i + 1} capacitance", "Capacitance of one capacitor"),
                                  (e, f"Bank {i + 1} ESR", "ESR of one capacitor"),
                                  (k, f"Bank {i + 1} count", "Identical capacitors in parallel")):
                self._widgets[w.key] = w
                self._labels[w.key] = label
                w.set_help(f"{tip}\n{_NOTATION}" if w is not k else tip)
                w.edited.connect(self._on_widget_edited)
            self._caps_grid.addWidget(c, i, 0)
            self._caps_grid.addWidget(e, i, 1)
            self._caps_grid.addWidget(k, i, 2)
            self._caps_grid.addWidget(rm, i, 3)
            c.setPlaceholderText("C")
            e.setPlaceholderText("ESR")
            self._cap_rows.append((c, e, k, rm))
        for row in self._cap_rows:
            row[3].setEnabled(n > 1)

    # ------------------------------------------------------------------ model -> widgets
    def _set_row_visible(self, key: str, visible: bool) -> None:
        form, widget = self._rows[key]
        form.setRowVisible(widget, visible)

    def _on_design_changed(self, design) -> None:
        st, op, se, mo, co = design.stage, design.operating, design.sensing, design.modulator, design.compensator
        with QSignalBlocker(self._title):
            self._title.setText(design.title)
            self._title.setCursorPosition(0)
        values = {
            "stage.fsw": st.fsw, "stage.inductance": st.inductance, "stage.dcr": st.dcr,
            "stage.r_switch": st.r_switch, "stage.r_rectifier": st.r_rectifier, "stage.diode_drop": st.diode_drop,
            "stage.turns_ratio": st.turns_ratio, "stage.buck_max_duty": st.buck_max_duty,
            "stage.boost_min_duty": st.boost_min_duty, "operating.vout": op.vout,
            "sensing.reference": se.reference, "sensing.r_top": se.r_top,
            "sensing.divider_current": se.divider_current, "sensing.diff_bandwidth": se.diff_bandwidth,
            "modulator.ramp": mo.ramp, "modulator.max_duty": mo.max_duty,
            "compensator.opamp.gain_db": co.opamp.gain_db, "compensator.opamp.gbw": co.opamp.gbw,
            "compensator.opamp.gm": co.opamp.gm, "compensator.opamp.r_out": co.opamp.r_out,
            "operating.vin_min": min(op.vin), "operating.vin_max": max(op.vin),
        }
        for key in ("ctr", "r_pull", "r_led", "c_opto", "v_pullup", "v_pin", "v_led", "v_shunt_min"):
            w = self._widgets[f"compensator.opto.{key}"]
            with QSignalBlocker(w):
                if key in co.opto:
                    w.set_value(co.opto[key])
                else:
                    w.clear_value()
        for key, value in values.items():
            w = self._widgets[key]
            with QSignalBlocker(w):
                w.set_value(value)
        w = self._widgets["operating.vin_nominal"]
        with QSignalBlocker(w):
            if op.vin_nominal is None:
                w.clear_value()
            else:
                w.set_value(op.vin_nominal)
        for key, vals in (("operating.vin", op.vin), ("operating.load", op.load)):
            w = self._widgets[key]
            with QSignalBlocker(w):
                w.set_values(vals)
        with QSignalBlocker(self._vin_points):
            self._vin_points.set_count(len(op.vin))
        for key, value in (("stage.topology", st.topology), ("stage.rectifier", st.rectifier),
                           ("stage.light_load", st.light_load), ("sensing.kind", se.kind)):
            w = self._widgets[key]
            with QSignalBlocker(w):
                w.set_choice(value)
        auto = self._widgets["stage.light_load"]
        auto.setItemText(0, "Automatic (enters DCM)" if st.light_load_mode == "dcm" else "Automatic (forced CCM)")
        w = self._widgets["modulator.feedforward"]
        with QSignalBlocker(w):
            w.set_flag(mo.feedforward)
        self._rebuild_caps(len(st.output_caps))
        for i, bank in enumerate(st.output_caps):
            c, e, k, _ = self._cap_rows[i]
            for w, v in ((c, bank.capacitance), (e, bank.esr)):
                with QSignalBlocker(w):
                    w.set_value(v)
            with QSignalBlocker(k):
                k.set_count(bank.count)
        n = op.n_corners
        self._corners_label.setText(f"{len(op.vin)} input voltages × {len(op.load)} loads = {n} corners")
        corner = self._widgets["compensator.design_corner"]
        with QSignalBlocker(corner):
            corner.clear()
            corner.addItem("Worst corner", None)
            vin, load = op.corners()
            for i in range(n):
                corner.addItem(f"{i}: {corner_label(vin[i], load[i])}", i)
            corner.set_choice(co.design_corner)
        topo = st.topology
        self._set_row_visible("stage.turns_ratio", topo == "flyback")
        self._set_row_visible("stage.buck_max_duty", topo == "four-switch-buck-boost")
        self._set_row_visible("stage.boost_min_duty", topo == "four-switch-buck-boost")
        self._set_row_visible("stage.diode_drop", st.rectifier == "diode")
        ctl = design.control
        current_mode = ctl.scheme == "peak-current"
        w = self._widgets["control.scheme"]
        with QSignalBlocker(w):
            w.set_choice(ctl.scheme)
        for key, value in (("control.sense_gain", ctl.sense_gain), ("control.current_limit", ctl.current_limit),
                           ("control.slope", ctl.slope)):
            w = self._widgets[key]
            with QSignalBlocker(w):
                if value is None:
                    w.clear_value()
                else:
                    w.set_value(value)
        for key in ("control.sense_gain", "control.slope", "control.current_limit"):
            self._set_row_visible(key, current_mode)
        digital = ctl.scheme == "digital"
        for key in ("modulator.ramp", "modulator.feedforward"):
            self._set_row_visible(key, not current_mode and not digital)
        for key in DIGITAL_KEYS:
            w = self._widgets[key]
            value = getattr(design.digital, key.split(".")[1])
            with QSignalBlocker(w):
                if isinstance(w, ChoiceBox):
                    w.set_choice(value)
                else:
                    w.set_value(value)
            self._set_row_visible(key, digital)
        self._set_row_visible("sensing.diff_bandwidth", se.kind == "differential")
        self._set_row_visible("sensing.divider_current", se.kind == "divider")
        self._targets_key = None
        self._show_error()
        self._update_parts_note()

    def _on_targets_changed(self, targets) -> None:
        key = (targets.design_corner, targets.network, self._model.parts_given)
        if key == getattr(self, "_targets_key", None):
            return  # a crossover or phase-margin move: nothing here changes
        self._targets_key = key
        w = self._widgets["compensator.design_corner"]
        with QSignalBlocker(w):
            w.set_choice(targets.design_corner)
        self._network_rows(targets.network)
        self._update_parts_note()

    def _network_rows(self, network: str) -> None:
        amplifier = network_module(network).AMPLIFIER  # which amplifier fields the network uses
        for key in ("gain_db", "gbw"):
            self._set_row_visible(f"compensator.opamp.{key}", amplifier == "op-amp")
        for key in ("gm", "r_out"):
            self._set_row_visible(f"compensator.opamp.{key}", amplifier == "transconductance")
        for key in ("ctr", "r_pull", "r_led", "c_opto", "v_pullup", "v_pin", "v_led", "v_shunt_min"):
            self._set_row_visible(f"compensator.opto.{key}", amplifier == "optocoupler")

    def _update_parts_note(self) -> None:
        if self._model.parts_given:
            self._parts_note.setText("Parts are given in the design and analysed as they are. Moving a target "
                                     "synthesises new parts.")
            self._parts_button.setText("Synthesise from targets")
        else:
            self._parts_note.setText("Parts are synthesised from the targets and snapped to the chosen series.")
            self._parts_button.setText("Keep parts in design")

    # ------------------------------------------------------------------ validation marks
    def widget_for(self, field: str):
        """The widget that edits ``field`` (longest matching key), or None."""
        if field in self._widgets:
            return self._widgets[field]
        base = field.split("[")[0] if field.count("[") and field.split("[")[0] in self._widgets else None
        if base:
            return self._widgets[base]
        best = None
        for key in self._widgets:
            if field.startswith(key) and (best is None or len(key) > len(best)):
                best = key
        return self._widgets.get(best) if best else None

    def show_network_rows(self, network: str) -> None:
        """Show the amplifier rows ``network`` needs (also before it is accepted, to fill them in)."""
        self._network_rows(network)

    def _show_error(self) -> None:
        """The strip above the form lists the fields that hold a rejected value."""
        bad = [w for w in self._widgets.values() if w.invalid]
        if not bad:
            self.error_strip.setVisible(False)
            return
        lines = [f"<b>{self._labels.get(w.key, w.key)}</b>: {w.toolTip()}" for w in bad]
        self.error_strip.setText("<br>".join(lines) + "<br><i>Not applied: the last valid design is in use.</i>")
        self.error_strip.setVisible(True)

    def _on_field_invalid(self, field: str, message: str) -> None:
        w = self.widget_for(field)
        if w is None:
            return
        w.mark_invalid(message)
        self._show_error()
        self.ensureWidgetVisible(w)
        self.message.emit(message)

    def _on_field_valid(self, field: str) -> None:
        w = self.widget_for(field)
        if w is not None:
            w.mark_valid()
        self._show_error()

    # ------------------------------------------------------------------ widgets -> model
    def _on_widget_edited(self, key: str, value) -> None:
        label = self._labels.get(key, key)
        if key == "compensator.design_corner":
            self._model.set_targets("Design corner", design_corner=value)
            return
        if key == "operating.vin_nominal" and value == "":
            value = None
        if (key.startswith("compensator.opto.") or key in ("control.slope", "control.current_limit")) and value == "":
            value = None
        if key == "control.scheme":
            changes = {key: value}
            if value == "peak-current" and not self._model.design.control.sense_gain:
                changes["control.sense_gain"] = DEFAULT_SENSE_GAIN_OHM
            if value == "digital" and not self._model.design.digital.pwm_clock:
                changes["digital.pwm_clock"] = DEFAULT_PWM_COUNTS * self._model.design.stage.fsw
            for name in ("slope", "slope_amplitude", "slope_ratio"):  # a new scheme starts from the automatic slope
                changes[f"control.{name}"] = None
            self._model.edit(changes, "Change control scheme", key)
            return
        if key in ("operating.vin_min", "operating.vin_max", "operating.vin_points"):
            return  # applied by the Fill button
        self._model.edit({key: value}, f"Change {label.lower()}", key)

    def _on_fill_vin(self) -> None:
        self._model.edit({"operating.vin": None, "operating.vin_min": self._vin_min.text().strip(),
                          "operating.vin_max": self._vin_max.text().strip(),
                          "operating.vin_points": self._vin_points.value()},
                         "Fill input range", "operating.vin_max")

    def _on_title_edited(self) -> None:
        if self._title.text() != self._model.design.title:
            self._model.edit({"title": self._title.text()}, "Change title", "title")

    def _on_parts_mode_clicked(self) -> None:
        if self._model.parts_given:
            self._model.release_parts()
        else:
            self._model.fix_parts()

