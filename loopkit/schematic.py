"""Drawings of the compensator networks with their part values, as SVG.

:func:`network_svg` draws any of the five networks (``type1``, ``type2``,
``type3``, ``gm-type2``, ``opto-type2``) with schemdraw's SVG back end (no
matplotlib, no Qt).  Every part carries its designator and, when ``parts``
gives it, its value in engineering notation; a part without a value is drawn
with its designator alone, so the topology can be shown before synthesis.
Text is written as outlines (``svgconfig.text = 'path'``, SVG 1.1) so any SVG
renderer, Qt's included, shows it as drawn.

schemdraw is imported on the first drawing, not with this module.  It would
import ``matplotlib.pyplot`` for its matplotlib back end (about 1.4 s here, and
a GUI back-end choice in the app's process); loopkit uses only the SVG back
end, so when schemdraw is not imported yet, :func:`_schemdraw` hides the
matplotlib back end module during the import (schemdraw then defaults to SVG).

The drawings follow the circuits of :mod:`loopkit.networks` (the docstring of
each network module), node names included: ``in`` is the sensed voltage
(converter output), ``out`` the error-amplifier output or controller pin,
``vref`` the amplifier's reference input.
"""

from __future__ import annotations

import itertools
import sys
from contextlib import contextmanager

from .errors import DesignError
from .networks import NETWORKS, network_module
from .units import format_value

__all__ = ["network_svg"]

_LEAD = 0.0  # elements are drawn with their own leads; wires join them explicitly
_VALUE_COLOR = "#1f4e9a"
_NOTE_COLOR = "#555555"


def _schemdraw():
    """``(schemdraw, schemdraw.elements)``, imported without the matplotlib back end if not loaded yet."""
    if "schemdraw" not in sys.modules:
        key = "schemdraw.backends.mpl"
        had = key in sys.modules
        saved = sys.modules.get(key)
        sys.modules[key] = None  # makes schemdraw's optional 'from .backends.mpl import ...' fail
        try:
            import schemdraw
        finally:
            if had:
                sys.modules[key] = saved
            else:
                del sys.modules[key]
    import schemdraw
    import schemdraw.elements as elm

    return schemdraw, elm


@contextmanager
def _svg_settings(outline_text: bool):
    """schemdraw's SVG settings (module-global in schemdraw), restored afterwards."""
    schemdraw, _ = _schemdraw()
    cfg = schemdraw.svgconfig
    old = (cfg.text, cfg.svg2)
    cfg.text, cfg.svg2 = ("path" if outline_text else "text"), False
    try:
        yield
    finally:
        cfg.text, cfg.svg2 = old


class _Sheet:
    """A schemdraw drawing with the few primitives the networks need, in absolute coordinates."""

    def __init__(self, parts: dict, ctx):
        self.parts = dict(parts)
        self.ctx = ctx
        schemdraw, self.elm = _schemdraw()
        #: draw the divider's bottom resistor: not when the sensed voltage equals vref
        self.has_rb = "Rb" in parts or ctx is None or ctx.v_sensed - ctx.vref > 1e-9 * ctx.vref
        if "Rb" not in parts and "R1" in parts and ctx is not None and self.has_rb and ctx.vref > 0:
            # the value the networks use for a part list without Rb
            self.parts["Rb"] = float(parts["R1"]) * ctx.vref / (ctx.v_sensed - ctx.vref)
        self.d = schemdraw.Drawing(canvas="svg", show=False)
        self.d.config(fontsize=11, unit=3, lw=1.3)

    # ------------------------------------------------------------------ text
    def value_text(self, designator: str) -> str | None:
        value = self.parts.get(designator)
        if value is None:
            return None
        unit = "Ω" if designator.upper().startswith("R") else "F"
        return format_value(float(value), unit)

    def _two_line(self, start, end, designator: str, side: str = "right", value: str | None = None):
        """Designator (black) and value (blue) above/below a horizontal part, beside a vertical one."""
        value = value if value is not None else self.value_text(designator)
        xm, ym = (start[0] + end[0]) / 2, (start[1] + end[1]) / 2
        if start[1] == end[1]:
            self.note((xm, ym + 0.45), designator, valign="bottom", color="black", fontsize=11)
            if value:
                self.note((xm, ym - 0.45), value, valign="top", color=_VALUE_COLOR, fontsize=11)
            return
        dx, halign = (0.45, "left") if side == "right" else (-0.45, "right")
        self.note((xm + dx, ym + 0.05), designator, halign=halign, valign="bottom", color="black", fontsize=11)
        if value:
            self.note((xm + dx, ym - 0.05), value, halign=halign, valign="top", color=_VALUE_COLOR, fontsize=11)

    # ------------------------------------------------------------------ parts
    def resistor(self, start, end, designator, side="right", value=None):
        self._two_line(start, end, designator, side, value)
        return self.d.add(self.elm.Resistor().endpoints(start, end))

    def capacitor(self, start, end, designator, side="right", value=None):
        self._two_line(start, end, designator, side, value)
        return self.d.add(self.elm.Capacitor().endpoints(start, end))

    # ------------------------------------------------------------------ wiring
    def wire(self, *points):
        for a, b in itertools.pairwise(points):
            self.d.add(self.elm.Line().endpoints(a, b))

    def dot(self, p, open_=False):
        self.d.add(self.elm.Dot(open=open_).at(p))

    def ground(self, p, primary: bool = False):
        """Ground symbol; ``primary``: the controller side of an isolated supply (a different symbol)."""
        self.d.add((self.elm.GroundSignal() if primary else self.elm.Ground()).at(p))

    def terminal(self, p, name, side="left"):
        """An open circle with the node name beside it."""
        self.d.add(self.elm.Dot(open=True).at(p))
        halign = "right" if side == "left" else "left"
        dx = -0.25 if side == "left" else 0.25
        self.d.add(self.elm.Label().at((p[0] + dx, p[1])).label(name, halign=halign, valign="center", fontsize=12))

    def note(self, p, text, halign="center", valign="center", color=_NOTE_COLOR, fontsize=10):
        self.d.add(self.elm.Label().at(p).label(text, halign=halign, valign=valign, color=color, fontsize=fontsize))

    def opamp(self, in1, label=None):
        """Op-amp with its inverting input (top, ``in1``) at ``in1``; returns the element."""
        e = self.elm.Opamp(anchor="in1").at(in1).right()
        op = self.d.add(e)
        if label:
            x0, y0 = in1
            self.note((x0 + 1.0, y0 - 2.05), label, halign="center", valign="top")
        return op

    def vref_input(self, op, text):
        """A short lead from the non-inverting input to a ``vref`` label."""
        x, y = op.in2
        self.wire((x, y), (x - 0.6, y))
        self.terminal((x - 0.6, y), text)

    def svg(self) -> str:
        return self.d.get_imagedata("svg").decode()


def _vref_text(ctx) -> str:
    return "vref" if ctx is None else f"vref {ctx.vref:.4g} V"


def draw_opamp_network(sheet: _Sheet, network: str, ctx) -> None:
    """Inverting op-amp: R1 input, Rb to ground (dc), feedback per type; Type III adds R3-C3 across R1."""
    y_fb1, y_fb2 = 2.5, 5.0
    x_in, x_j, x_inv, x_rb, x_riser, x_op, x_out = 0.0, 1.0, 5.0, 6.5, 8.0, 10.0, 14.0
    sheet.terminal((x_in, 0), "in")
    sheet.wire((x_in, 0), (x_j, 0))
    sheet.resistor((x_j, 0), (x_inv, 0), "R1")
    if network == "type3":
        y3 = -2.5
        sheet.dot((x_j, 0))
        sheet.wire((x_j, 0), (x_j, y3))
        sheet.resistor((x_j, y3), (3.0, y3), "R3")
        sheet.capacitor((3.0, y3), (x_inv, y3), "C3")
        sheet.wire((x_inv, y3), (x_inv, 0))
        sheet.dot((x_inv, 0))
    sheet.wire((x_inv, 0), (x_op, 0))
    if sheet.has_rb:
        sheet.dot((x_rb, 0))
        sheet.resistor((x_rb, 0), (x_rb, -3.0), "Rb", side="left")
        sheet.ground((x_rb, -3.0))
    op = sheet.opamp((x_op, 0))
    sheet.vref_input(op, _vref_text(ctx))
    xo, yo = op.out
    sheet.wire((xo, yo), (x_out + 1.5, yo))
    sheet.terminal((x_out + 1.5, yo), "out", side="right")
    # feedback
    sheet.dot((x_riser, 0))
    sheet.dot((x_out, yo))
    top = y_fb1 if network == "type1" else y_fb2
    sheet.wire((x_riser, 0), (x_riser, top))
    sheet.wire((x_out, yo), (x_out, top))
    if network == "type1":
        sheet.capacitor((x_riser, y_fb1), (x_out, y_fb1), "C1")
        return
    sheet.dot((x_riser, y_fb1))
    sheet.dot((x_out, y_fb1))
    sheet.resistor((x_riser, y_fb1), (11.0, y_fb1), "R2")
    sheet.capacitor((11.0, y_fb1), (x_out, y_fb1), "C1")
    sheet.capacitor((x_riser, y_fb2), (x_out, y_fb2), "C2")


def draw_gm_network(sheet: _Sheet, ctx) -> None:
    """gm amplifier: divider R1/Rb into its inverting input, Rc-Cc and Chf from its output to ground."""
    x_in, x_fb, x_op = 0.0, 4.0, 7.5
    sheet.terminal((x_in, 0), "in")
    sheet.resistor((x_in, 0), (x_fb, 0), "R1")
    if sheet.has_rb:
        sheet.dot((x_fb, 0))
        sheet.resistor((x_fb, 0), (x_fb, -3.0), "Rb", side="left")
        sheet.ground((x_fb, -3.0))
    sheet.wire((x_fb, 0), (x_op, 0))
    amp = "gm amplifier"
    if ctx is not None:
        gm = format_value(ctx.opamp.gm, "S") if ctx.opamp.gm > 0 else "gm ?"
        ro = format_value(ctx.opamp.r_out, "Ω") if ctx.opamp.r_out > 0 else "∞"
        amp = f"gm amplifier\ngm {gm}, Ro {ro}"
    op = sheet.opamp((x_op, 0), amp)
    sheet.vref_input(op, _vref_text(ctx))
    sheet.note((x_op + 1.05, -0.625), "gm", halign="center", valign="center", color="black", fontsize=10)
    xo, yo = op.out
    x_c, x_hf, x_out = xo + 1.5, xo + 4.0, xo + 5.5
    sheet.wire((xo, yo), (x_out, yo))
    sheet.terminal((x_out, yo), "out", side="right")
    sheet.dot((x_c, yo))
    sheet.resistor((x_c, yo), (x_c, yo - 3.0), "Rc")
    sheet.capacitor((x_c, yo - 3.0), (x_c, yo - 6.0), "Cc")
    sheet.ground((x_c, yo - 6.0))
    sheet.dot((x_hf, yo))
    sheet.capacitor((x_hf, yo), (x_hf, yo - 3.0), "Chf")
    sheet.ground((x_hf, yo - 3.0))


def draw_opto_network(sheet: _Sheet, ctx) -> None:
    """Shunt regulator + optocoupler: R1/Rb to its reference, Cz (+Rz) feedback, LED from in via R_LED."""
    opto = dict(ctx.opto) if ctx is not None else {}

    def ctx_value(key, unit):
        return format_value(float(opto[key]), unit) if key in opto else ""

    y_rail, y_fb, y_ref = 7.0, 4.6, 2.5
    x_in, x_r1, x_riser, x_op, x_k, x_led = 0.0, 2.0, 3.5, 5.5, 9.5, 10.5
    sheet.terminal((x_in, y_rail), "in")
    sheet.wire((x_in, y_rail), (x_led, y_rail))
    sheet.dot((x_r1, y_rail))
    sheet.resistor((x_r1, y_rail), (x_r1, y_ref), "R1", side="left")
    if sheet.has_rb:
        sheet.dot((x_r1, y_ref))
        sheet.resistor((x_r1, y_ref), (x_r1, -0.5), "Rb", side="left")
        sheet.ground((x_r1, -0.5))
    sheet.wire((x_r1, y_ref), (x_op, y_ref))
    op = sheet.opamp((x_op, y_ref), "shunt regulator")
    sheet.note((x_op - 0.2, y_ref + 0.3), "ref", halign="right", valign="bottom", fontsize=9)
    sheet.vref_input(op, _vref_text(ctx))
    xo, yk = op.out
    sheet.wire((xo, yk), (x_led, yk))
    sheet.dot((x_k, yk))
    sheet.note((x_k, yk - 0.2), "K", halign="center", valign="top", fontsize=9)
    # Cz (+ Rz) from cathode to reference pin
    sheet.dot((x_riser, y_ref))
    sheet.wire((x_riser, y_ref), (x_riser, y_fb))
    if "Rz" in sheet.parts or not sheet.parts:
        sheet.capacitor((x_riser, y_fb), (6.5, y_fb), "Cz")
        sheet.resistor((6.5, y_fb), (x_k, y_fb), "Rz")
    else:
        sheet.capacitor((x_riser, y_fb), (x_k, y_fb), "Cz")
    sheet.wire((x_k, y_fb), (x_k, yk))
    # LED branch: in -> R_LED -> optocoupler LED (anode top, cathode bottom) -> cathode node K
    oc = sheet.elm.Optocoupler(anchor="anode").right()
    y_anode = y_fb + 0.3
    sheet.resistor((x_led, y_rail), (x_led, y_anode), "R_LED", side="left", value=ctx_value("r_led", "Ω"))
    oc = sheet.d.add(oc.at((x_led + 0.6, y_anode)))
    sheet.wire((x_led, y_anode), oc.anode)
    sheet.wire(oc.cathode, (x_led, oc.cathode[1]), (x_led, yk))
    # primary side: collector to the controller pin with Rpull to Vdd and Cpole to ground
    xc, yc = oc.collector
    xe, ye = oc.emitter
    x_pin, x_cp = xc + 1.5, xc + 3.0
    sheet.wire((xc, yc), (x_cp + 1.5, yc))
    sheet.terminal((x_cp + 1.5, yc), "out", side="right")
    sheet.dot((x_pin, yc))
    sheet.resistor((x_pin, yc + 3.0), (x_pin, yc), "Rpull", side="left", value=ctx_value("r_pull", "Ω"))
    sheet.d.add(sheet.elm.Vdd().at((x_pin, yc + 3.0)).label("Vdd", fontsize=10))
    sheet.wire((xe, ye), (xe, ye - 2.2))
    sheet.ground((xe, ye - 2.2), primary=True)
    sheet.dot((x_cp, yc))
    sheet.capacitor((x_cp, yc), (x_cp, yc - 3.0), "Cpole")
    sheet.ground((x_cp, yc - 3.0), primary=True)
    lines = ["optocoupler"]
    if "ctr" in opto:
        lines.append(f"CTR {float(opto['ctr']):.3g}")
    if ctx_value("c_opto", "F"):
        lines.append(f"Copto {ctx_value('c_opto', 'F')} internal")
    bbox = oc.get_bbox(transform=True)
    sheet.note(((bbox.xmin + bbox.xmax) / 2 - 0.3, bbox.ymin - 0.2), "\n".join(lines), valign="top")
    # isolation barrier through the optocoupler: output side left, controller side right
    x_iso = (bbox.xmin + bbox.xmax) / 2 - 0.3
    y_top, y_bottom = y_rail + 1.2, -1.0
    sheet.d.add(sheet.elm.Line().endpoints((x_iso, y_top), (x_iso, bbox.ymax + 0.1)).linestyle("--").color(_NOTE_COLOR))
    sheet.d.add(sheet.elm.Line().endpoints((x_iso, bbox.ymin - 1.6), (x_iso, y_bottom)).linestyle("--")
                .color(_NOTE_COLOR))
    sheet.note((x_iso - 0.2, y_top), "output side", halign="right", valign="top")
    sheet.note((x_iso + 0.2, y_top), "controller side", halign="left", valign="top")


def network_svg(network: str, parts: dict, ctx=None, *, outline_text: bool = True) -> str:
    """SVG drawing of a compensator network with its part values.

    Parameters
    ----------
    network : str
        One of :data:`loopkit.design.NETWORKS`.
    parts : dict
        Designator -> value (ohm, F); designators without a value are drawn
        with their name only.
    ctx : NetworkContext, optional
        Adds the reference voltage, the gm amplifier's gm and Ro, and the
        optocoupler's CTR, R_LED, Rpull and capacitance to the drawing; with
        it, a missing ``Rb`` is drawn with the value the networks compute
        (``R1 vref / (v_sensed - vref)``), or left out when the sensed voltage
        equals vref (no divider).
    outline_text : bool
        True (default): text as outlines, which every SVG renderer shows the
        same (Qt's included); False: SVG ``<text>`` elements (searchable).

    Returns
    -------
    str
        A standalone SVG 1.1 document.

    Raises
    ------
    DesignError
        For an unknown network name.
    """
    if network not in NETWORKS:
        raise DesignError("compensator.network", network, f"must be one of {', '.join(NETWORKS)}")
    with _svg_settings(outline_text):
        sheet = _Sheet(parts, ctx)
        network_module(network).draw(sheet, ctx)  # each network draws itself with the sheet's parts
        return sheet.svg()
