"""The Bode view: loop gain of every corner, coloured by input voltage.

Curves live in view coordinates: x is ``log10(f)`` (see :mod:`app.freq`, the
one place that converts), y is dB or degrees.  The plot items are created when
the number of corners changes and otherwise only get ``setData``; axis ranges
are fitted on a design change and stay fixed while targets move, so a drag
redraws without rescaling.
"""

from __future__ import annotations

import html
import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QRectF, QSignalBlocker, Qt, Signal
from PySide6.QtGui import QColor, QFont, QPen
from PySide6.QtWidgets import QGraphicsItem, QGraphicsView, QLabel, QVBoxLayout, QWidget

from loopkit import format_value
from loopkit.margins import GM_WORDS, gm_state

from .corners_view import GM_BEYOND_TIP
from .freq import hz_to_view, view_to_hz
from .readout import infeasible_reason

__all__ = ["BodeView", "FrequencyAxis", "load_styles", "magnitude_db", "vin_colour_map"]

pg.setConfigOptions(antialias=False, background="w", foreground="#222")

#: Colour map for input voltage: a perceptual map, cut before its palest end so every curve reads on white.
_MAP_NAME = "plasma"
_MAP_SPAN = (0.0, 0.82)
_LABEL_STYLE = {"font-size": "10pt"}
_STYLES = (Qt.SolidLine, Qt.DashLine, Qt.DotLine, Qt.DashDotLine, Qt.DashDotDotLine)


def vin_colour_map() -> pg.ColorMap:
    """The input-voltage colour scale (lowest vin dark blue, highest orange)."""
    base = pg.colormap.get(_MAP_NAME)
    pos = np.linspace(0.0, 1.0, 9)
    colours = base.map(_MAP_SPAN[0] + pos * (_MAP_SPAN[1] - _MAP_SPAN[0]), mode="qcolor")
    return pg.ColorMap(pos, colours)


def load_styles(loads) -> dict:
    """Line style per load: the largest load solid, lighter loads dashed, dotted..."""
    order = sorted({float(x) for x in loads}, reverse=True)
    return {x: _STYLES[min(i, len(_STYLES) - 1)] for i, x in enumerate(order)}


def magnitude_db(resp: np.ndarray) -> np.ndarray:
    """|H| in dB for display (the unit conversion only)."""
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(resp))


class FrequencyAxis(pg.AxisItem):
    """Log-frequency axis in view coordinates: decades labelled 10, 100, 1k..., and 2 and 5 between."""

    def tickValues(self, minVal, maxVal, size):
        if not (math.isfinite(minVal) and math.isfinite(maxVal)) or maxVal <= minVal:
            return []
        lo, hi = math.floor(minVal), math.ceil(maxVal)
        decades = [float(d) for d in range(lo, hi + 1) if minVal <= d <= maxVal]
        per_decade = size / max(maxVal - minVal, 1e-9)
        two_five, rest = [], []
        for d in range(lo, hi + 1):
            for m in range(2, 10):
                v = d + math.log10(m)
                if minVal <= v <= maxVal:
                    (two_five if m in (2, 5) else rest).append(v)
        levels = [(1.0, decades)]
        if per_decade > 110:
            levels.append((0.5, two_five))
            levels.append((0.1, rest))
        else:
            levels.append((0.1, two_five + rest))
        return levels

    def tickStrings(self, values, scale, spacing):
        if spacing < 0.3:
            return ["" for _ in values]
        return [format_value(view_to_hz(v), digits=2) for v in values]


class PhaseAxis(pg.AxisItem):
    """Degrees, ticks on multiples of 45 (or 90 when space is short)."""

    def tickValues(self, minVal, maxVal, size):
        span = maxVal - minVal
        if not math.isfinite(span) or span <= 0:
            return []
        major = 90.0 if size / max(span, 1e-9) * 45 < 18 else 45.0
        if span > 720:
            major = 180.0
        first = math.ceil(minVal / major) * major
        return [(major, list(np.arange(first, maxVal + 1e-9, major)))]


class _Grid:
    """Grid lines as two line-pair curves (major, minor) at the axes' own ticks.

    pyqtgraph's axis grid costs about 20 ms a repaint here; two cosmetic
    line-pair paths cost well under one.
    """

    def __init__(self, plot, x_axis, y_axis):
        self._plot, self._x_axis, self._y_axis = plot, x_axis, y_axis
        self._major = pg.PlotCurveItem(pen=_pen("#000000", Qt.SolidLine, 1.0, 46), connect="pairs")
        self._minor = pg.PlotCurveItem(pen=_pen("#000000", Qt.SolidLine, 1.0, 18), connect="pairs")
        for item in (self._major, self._minor):
            item.setZValue(-10)
            plot.addItem(item, ignoreBounds=True)
        vb = plot.getViewBox()
        vb.sigRangeChanged.connect(self.update)
        vb.sigResized.connect(self.update)

    @staticmethod
    def _levels(axis, lo, hi, size):
        levels = axis.tickValues(lo, hi, size) if size > 0 else []
        major = list(levels[0][1]) if levels else []
        minor = [v for _, vals in levels[1:] for v in vals]
        return major, minor

    def update(self, *_) -> None:
        vb = self._plot.getViewBox()
        (x0, x1), (y0, y1) = vb.viewRange()
        xs_major, xs_minor = self._levels(self._x_axis, x0, x1, vb.width())
        ys_major, ys_minor = self._levels(self._y_axis, y0, y1, vb.height())
        for item, xs, ys in ((self._major, xs_major, ys_major), (self._minor, xs_minor, ys_minor)):
            px, py = [], []
            for x in xs:
                px += [x, x]
                py += [y0, y1]
            for y in ys:
                px += [x0, x1]
                py += [y, y]
            item.setData(np.asarray(px, float), np.asarray(py, float), connect="pairs")


class CurveBundle(pg.GraphicsObject):
    """Many curves that share one x grid, drawn by one item (one per plot and kind).

    One item instead of one PlotCurveItem per corner: the bounds of all
    curves come from one vectorised min/max and the paint loop is a plain
    ``drawPath`` per curve, which keeps a 21-corner redraw within a frame.

    Parameters
    ----------
    connect : str
        ``"all"`` (finite data) or ``"finite"`` (gaps where data is not finite).
    """

    def __init__(self, connect: str = "all"):
        super().__init__()
        self._connect = connect
        self._paths: list = []
        self._pens: list[QPen] = []
        self._order: list[int] = []
        self._rect = QRectF()
        self._x = np.zeros(0)
        self._y = np.zeros((0, 0))
        self._poly_x = None

    @property
    def n(self) -> int:
        return len(self._paths)

    def set_pens(self, pens, order=None) -> None:
        """One pen per curve; ``order`` is the drawing order (last on top)."""
        self._pens = list(pens)
        self._order = list(range(len(self._pens))) if order is None else list(order)
        self.update()

    def set_data(self, x: np.ndarray, y: np.ndarray) -> None:
        """``x`` (nf,) view coordinates shared by all curves, ``y`` (curves, nf)."""
        self._x, self._y = x, y
        if self._connect == "all":
            # one polyline per curve, filled in place: cheaper to build and to draw than a QPainterPath
            polys = self._paths if len(self._paths) == y.shape[0] and isinstance(self._poly_x, np.ndarray) \
                and self._poly_x is x else None
            if polys is None:
                polys = [pg.functions.create_qpolygonf(x.size) for _ in range(y.shape[0])]
                self._poly_x = x
            for poly, row in zip(polys, y):
                buf = pg.functions.ndarray_from_qpolygonf(poly)
                buf[:, 0] = x
                buf[:, 1] = row
            self._paths = polys
        else:
            self._paths = [pg.arrayToQPath(x, row, connect=self._connect) for row in y]
        finite = y[np.isfinite(y)] if self._connect == "finite" else y
        if finite.size and x.size:
            y0, y1 = float(np.min(finite)), float(np.max(finite))
            rect = QRectF(float(x[0]), y0, float(x[-1] - x[0]), max(y1 - y0, 1e-12))
        else:
            rect = QRectF()
        if rect != self._rect:
            self.prepareGeometryChange()
            self._rect = rect
        self.update()

    def curve(self, k: int) -> np.ndarray:
        """The y data of curve ``k`` as drawn."""
        return self._y[k]

    def boundingRect(self) -> QRectF:
        return QRectF(self._rect)

    def dataBounds(self, ax, frac=1.0, orthoRange=None):
        if self._rect.isNull():
            return (None, None)
        r = self._rect
        return (r.left(), r.right()) if ax == 0 else (r.top(), r.bottom())

    def paint(self, p, *args) -> None:
        p.setRenderHint(p.RenderHint.Antialiasing, False)
        poly = self._connect == "all"
        for k in self._order:
            if k < len(self._paths) and k < len(self._pens):
                p.setPen(self._pens[k])
                if poly:
                    p.drawPolyline(self._paths[k])
                else:
                    p.drawPath(self._paths[k])


class Dot(pg.GraphicsObject):
    """A small open circle of fixed pixel size at one point (cheaper to move than a ScatterPlotItem)."""

    _RADIUS_PX = 4.5

    def __init__(self, colour: str):
        super().__init__()
        self._pen = _pen(colour, Qt.SolidLine, 1.5)
        self._x = self._y = 0.0
        self.setFlag(self.GraphicsItemFlag.ItemIgnoresTransformations)  # draw in pixels around the point

    def set_pos(self, x: float, y: float) -> None:
        self.setPos(x, y)

    def boundingRect(self) -> QRectF:
        r = self._RADIUS_PX + 2
        return QRectF(-r, -r, 2 * r, 2 * r)

    def paint(self, p, *args) -> None:
        p.setRenderHint(p.RenderHint.Antialiasing, True)
        p.setPen(self._pen)
        p.setBrush(QColor("white"))
        r = self._RADIUS_PX
        p.drawEllipse(QRectF(-r, -r, 2 * r, 2 * r))


class Shade(pg.GraphicsObject):
    """A grey band from ``x0`` to ``x1`` (view coordinates) over the visible height, edged by a dotted line.

    Drawn as one opaque rectangle in device pixels under the grid: a translucent
    fill through the view's scaling (as a LinearRegionItem draws) costs a few
    milliseconds a repaint.
    """

    def __init__(self, view_box):
        super().__init__()
        self._vb = view_box
        self._x0 = self._x1 = 0.0
        self._brush = QColor("#f0f0f0")  # opaque, under the grid: cheap to fill
        self._edge = _pen("#888", Qt.DotLine, 1.0)
        view_box.sigYRangeChanged.connect(self._on_range_changed)

    def set_span(self, x0: float, x1: float) -> None:
        self.prepareGeometryChange()
        self._x0, self._x1 = float(x0), float(x1)
        self.update()

    def _on_range_changed(self, *_) -> None:
        self.prepareGeometryChange()
        self.update()

    def boundingRect(self) -> QRectF:
        (_, _), (y0, y1) = self._vb.viewRange()
        return QRectF(self._x0, y0, max(self._x1 - self._x0, 0.0), y1 - y0)

    def paint(self, p, *args) -> None:
        r = self.boundingRect()
        if r.width() <= 0:
            return
        p.setRenderHint(p.RenderHint.Antialiasing, False)
        device = p.transform().mapRect(r).toAlignedRect()
        p.save()
        p.resetTransform()  # an axis-aligned fill in device pixels: the raster engine's fast path
        p.fillRect(device, self._brush)
        p.setPen(self._edge)
        p.drawLine(device.topLeft(), device.bottomLeft())
        p.restore()


def _pen(colour, style=Qt.SolidLine, width=1.0, alpha=255) -> QPen:
    c = QColor(colour)
    c.setAlpha(alpha)
    pen = QPen(c)
    pen.setWidthF(width)
    pen.setCosmetic(True)
    pen.setStyle(style)
    return pen


_GHOST_PEN = _pen("#8c8c8c", Qt.DashLine, 1.0)


class BodeView(QWidget):
    """Magnitude and phase of the loop gain at every corner, with the worst corner's margins.

    Signals
    -------
    marker_moved(float)
        Live position of the crossover-target marker, Hz.
    marker_released(float)
        Where the marker was let go, Hz (the moment to record an undo step).
    """

    marker_moved = Signal(float)
    marker_released = Signal(float)

    def __init__(self, model, parent=None):
        super().__init__(parent)
        self._model = model
        self._cmap = vin_colour_map()
        self._x = np.zeros(0)
        self._n = 0
        self._fit_pending = True
        self._show_plant = False
        self._show_comp = False
        self._plant_phase = None
        self._corner_pens: list[QPen] = []
        self._styles: dict = {}
        self._corner_colours: list[QColor] = []

        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        self.canvas = pg.GraphicsLayoutWidget()
        self.canvas.setObjectName("bode_canvas")
        # one clip rectangle per repaint: many small update rectangles make every drawPath slow
        self.canvas.setViewportUpdateMode(QGraphicsView.FullViewportUpdate)
        self.canvas.setOptimizationFlag(QGraphicsView.DontAdjustForAntialiasing, True)  # cosmetic pens, no AA
        layout.addWidget(self.canvas)
        self.canvas.ci.setSpacing(2)
        self.mag = self.canvas.addPlot(row=0, col=0, axisItems={"bottom": FrequencyAxis("bottom")})
        self.phase = self.canvas.addPlot(row=1, col=0, axisItems={"bottom": FrequencyAxis("bottom"),
                                                                 "left": PhaseAxis("left")})
        self.phase.setXLink(self.mag)
        for plot in (self.mag, self.phase):
            plot.setMenuEnabled(False)
            plot.hideButtons()
            plot.getViewBox().setMouseMode(pg.ViewBox.PanMode)
            plot.getAxis("left").setWidth(62)
        label_style = _LABEL_STYLE
        self.mag.getAxis("left").setLabel("Loop gain |T| (dB)", **label_style)
        self.phase.getAxis("left").setLabel("Phase of T (°)", **label_style)
        self.phase.getAxis("bottom").setLabel("Frequency (Hz)", **label_style)
        self.mag.getAxis("bottom").setStyle(showValues=False)
        self._grids = [_Grid(p, p.getAxis("bottom"), p.getAxis("left")) for p in (self.mag, self.phase)]
        for plot in (self.mag, self.phase):  # axes change only with the view: repainted from a cached pixmap
            for name in ("left", "bottom"):
                plot.getAxis(name).setCacheMode(QGraphicsItem.DeviceCoordinateCache)
        self.canvas.ci.layout.setRowStretchFactor(0, 5)
        self.canvas.ci.layout.setRowStretchFactor(1, 4)

        self.colour_bar = pg.ColorBarItem(values=(0.0, 1.0), colorMap=self._cmap, interactive=False,
                                          width=14, colorMapMenu=False, pen="#444")
        bar_axis = self.colour_bar.getAxis("right")
        bar_axis.setLabel("Input voltage (V)", **label_style)
        bar_axis.setWidth(58)
        self.canvas.addItem(self.colour_bar, row=0, col=1, rowspan=2)
        for item in [self.colour_bar, *self.colour_bar.childItems()]:
            item.setCacheMode(QGraphicsItem.DeviceCoordinateCache)

        # reference lines
        grey = _pen("#777", Qt.SolidLine, 1.0)
        self._zero_db = pg.InfiniteLine(pos=0.0, angle=0, pen=grey)
        self.mag.addItem(self._zero_db, ignoreBounds=True)
        self._ref180 = pg.InfiniteLine(pos=-180.0, angle=0, pen=grey)
        self.phase.addItem(self._ref180, ignoreBounds=True)

        # every corner's curves: one bundle item per plot and kind
        self.loop_mag = CurveBundle()
        self.loop_phase = CurveBundle()
        self.plant_mag = CurveBundle("finite")
        self.plant_phase = CurveBundle("finite")
        for plot, item, z in ((self.mag, self.loop_mag, 2), (self.phase, self.loop_phase, 2),
                              (self.mag, self.plant_mag, 1), (self.phase, self.plant_phase, 1)):
            item.setZValue(z)
            plot.addItem(item)
        self.plant_mag.setVisible(False)
        self.plant_phase.setVisible(False)
        self._comp_mag = pg.PlotCurveItem(pen=_pen("#1b1b1b", Qt.DashDotLine, 1.4))
        self._comp_phase = pg.PlotCurveItem(pen=_pen("#1b1b1b", Qt.DashDotLine, 1.4))
        for plot, item in ((self.mag, self._comp_mag), (self.phase, self._comp_phase)):
            item.setZValue(5)
            item.setVisible(False)
            plot.addItem(item)

        # the last feasible loop, kept (grey, dashed) while the targets cannot be met
        self.ghost_mag = CurveBundle()
        self.ghost_phase = CurveBundle()
        for plot, item in ((self.mag, self.ghost_mag), (self.phase, self.ghost_phase)):
            item.setZValue(1.5)
            item.setVisible(False)
            plot.addItem(item)
        self._last_loop = None  # (mag_db, phase_deg) of the last feasible result of this design
        self._ghost_on = False
        self._infeasible = False

        # above fsw/2 the averaged model does not hold: shaded, with its edge marked
        self._half_fsw = [Shade(plot.getViewBox()) for plot in (self.mag, self.phase)]
        for plot, item in zip((self.mag, self.phase), self._half_fsw):
            item.setZValue(-20)  # under the grid (-10)
            item.setToolTip("Above fsw/2 the averaged model does not predict the loop")
            plot.addItem(item, ignoreBounds=True)
        self._half_fsw_text = pg.TextItem("fsw/2", color="#666", anchor=(1.05, 0.0))
        self.phase.addItem(self._half_fsw_text, ignoreBounds=True)

        # worst corner: drawn heavier, last, by the bundles; and the margin markers
        self._worst = -1
        mark_pen = _pen("#0a7d32", Qt.SolidLine, 2.2)
        gm_pen = _pen("#b02a00", Qt.SolidLine, 2.2)
        self._pm_bar = pg.PlotCurveItem(pen=mark_pen)
        self._pm_ref = pg.PlotCurveItem(pen=_pen("#0a7d32", Qt.DashLine, 1.0))
        self._gm_bar = pg.PlotCurveItem(pen=gm_pen)
        self._fc_dot_mag = Dot("#0a7d32")
        self._fc_dot_phase = Dot("#0a7d32")
        self._f180_dot = Dot("#b02a00")
        self._f180_dot_mag = Dot("#b02a00")
        font = QFont()
        font.setPointSizeF(9.0)
        font.setBold(True)
        self._pm_text = pg.TextItem(color="#0a7d32", anchor=(0.0, 0.5), fill=(255, 255, 255))
        self._gm_text = pg.TextItem(color="#b02a00", anchor=(0.0, 0.5), fill=(255, 255, 255))
        for t in (self._pm_text, self._gm_text):
            t.setFont(font)
        for plot, items in ((self.phase, (self._pm_ref, self._pm_bar, self._fc_dot_phase, self._f180_dot,
                                          self._pm_text)),
                            (self.mag, (self._gm_bar, self._fc_dot_mag, self._f180_dot_mag, self._gm_text))):
            for item in items:
                item.setZValue(20)
                plot.addItem(item, ignoreBounds=True)

        # crossover-target marker, dragged along the frequency axis
        target_pen = _pen("#00649c", Qt.DashLine, 1.6)
        self.marker = pg.InfiniteLine(angle=90, movable=True, pen=target_pen,
                                      hoverPen=_pen("#00649c", Qt.SolidLine, 2.6),
                                      label="target fc", labelOpts={"position": 0.94, "color": "#00649c",
                                                                    "fill": (255, 255, 255), "movable": False})
        self.marker.setZValue(30)
        self.mag.addItem(self.marker, ignoreBounds=True)
        self._marker_twin = pg.InfiniteLine(angle=90, movable=False, pen=target_pen)
        self.phase.addItem(self._marker_twin, ignoreBounds=True)
        self.marker.sigPositionChanged.connect(self._on_marker_position_changed)
        self.marker.sigPositionChangeFinished.connect(self._on_marker_position_change_finished)

        self.legend = pg.LegendItem(offset=(8, -8), labelTextSize="8pt", brush=(255, 255, 255, 215),
                                    pen="#bbb", verSpacing=-6)
        self.legend.setParentItem(self.mag.getViewBox())
        self.legend.setCacheMode(QGraphicsItem.DeviceCoordinateCache)
        self._legend_items: list = []
        self._legend_key = None
        self._axis_extra = None

        # why the targets cannot be met: a strip above the plot (never over the curves)
        self._infeasible_text = QLabel()
        self._infeasible_text.setObjectName("infeasible_reason")
        self._infeasible_text.setWordWrap(True)
        self._infeasible_text.setStyleSheet("background: #fdecea; color: #8a1c0c; border: 1px solid #e6a39a;"
                                            " border-radius: 3px; padding: 3px;")
        layout.insertWidget(0, self._infeasible_text)
        self._infeasible_text.setVisible(False)

        self._gm_word = pg.TextItem(color="#555", anchor=(1.0, 0.0), fill=(255, 255, 255))
        self._gm_word.setFont(font)
        self._gm_word.setZValue(20)
        self.mag.addItem(self._gm_word, ignoreBounds=True)
        self._gm_word.setVisible(False)
        self._gm_word_state = None
        self._x_half = math.inf

        model.design_changed.connect(self._on_design_changed)
        model.results_changed.connect(self._on_results_changed)
        model.targets_changed.connect(self._on_targets_changed)
        model.highlight_changed.connect(self._on_highlight_changed)
        self._on_design_changed(model.design)
        self._on_targets_changed(model.targets)
        self._on_results_changed(model.result)

    # ------------------------------------------------------------------ options
    def set_show_plant(self, on: bool) -> None:
        self._show_plant = bool(on)
        self.plant_mag.setVisible(self._show_plant or self._infeasible)
        self.plant_phase.setVisible(self._show_plant or self._infeasible)
        self._fill_legend()
        self._fit_pending = True
        self._on_results_changed(self._model.result)

    def set_show_compensator(self, on: bool) -> None:
        self._show_comp = bool(on)
        self._comp_mag.setVisible(self._show_comp and not self._infeasible)
        self._comp_phase.setVisible(self._show_comp and not self._infeasible)
        self._fill_legend()
        self._fit_pending = True
        self._on_results_changed(self._model.result)

    def fit(self) -> None:
        """Fit the axes to what is shown."""
        self._fit_pending = True
        self._on_results_changed(self._model.result)

    # ------------------------------------------------------------------ model -> items
    def _on_design_changed(self, design) -> None:
        result = self._model.result
        stage = result.stage
        n = stage.n_corners
        self._n = n
        self._x = hz_to_view(result.f_hz)
        self._worst = result.worst_corner if result.feasible else -1
        vmin, vmax = float(np.min(stage.vin)), float(np.max(stage.vin))
        if vmax - vmin < 1e-9:
            vmin, vmax = vmin - 0.5, vmax + 0.5
        self.colour_bar.setLevels((vmin, vmax))
        styles = load_styles(stage.load)
        self._corner_colours = [self._cmap.map((v - vmin) / (vmax - vmin), mode="qcolor") for v in stage.vin]
        self._corner_styles = [styles[float(x)] for x in stage.load]
        # plant: fixed for this design
        self._plant_phase = stage.gvd.phase_deg(result.f_hz)
        self.plant_mag.set_data(self._x, magnitude_db(result.plant_resp))
        self.plant_phase.set_data(self._x, self._plant_phase)
        self._plant_pens()
        self._apply_pens()
        self._styles = styles
        self._fill_legend()
        with QSignalBlocker(self.marker):  # a bound that moves the marker is not the user dragging it
            self.marker.setBounds((self._x[0], self._x[-1]))
        x_half = hz_to_view(result.design.stage.fsw / 2.0)
        for item in self._half_fsw:
            item.set_span(x_half, max(float(self._x[-1]), x_half))
        self._x_half = x_half
        self._half_fsw_text.setPos(x_half, 0.0)
        self._last_loop = None  # a new plant: the last feasible loop was another design's
        self._show_ghost(False)
        self._fit_pending = True

    def _fill_legend(self) -> None:
        """One entry per load (line style), then the plant and compensator when shown.

        Rebuilt only when its entries change (pyqtgraph's legend costs about 30 ms to rebuild).
        """
        what = "plant Gvd" if self._infeasible else "loop T"
        entries = [(_pen("#333", style, 1.2), f"{what}, load {format_value(x, 'A')}")
                   for x, style in sorted(self._styles.items(), key=lambda kv: -kv[0])]
        if self._show_plant and not self._infeasible:
            entries.append((_pen("#333", Qt.SolidLine, 1.0, 90), "plant Gvd (faint)"))
        if self._infeasible and self._ghost_on:
            entries.append((_GHOST_PEN, "last feasible loop"))
        if self._show_comp and not self._infeasible:
            entries.append((self._comp_mag.opts["pen"], "compensator Gc (T = −Tu·Gc)"))
        key = tuple((pen.style(), pen.color().rgba(), pen.widthF(), text) for pen, text in entries)
        if key != self._legend_key:
            self._legend_key = key
            self.legend.clear()
            for pen, text in entries:
                self.legend.addItem(pg.PlotDataItem(pen=pen), text)
        extra = self._show_plant or self._show_comp or self._infeasible
        if extra != self._axis_extra:
            self._axis_extra = extra
            self.mag.getAxis("left").setLabel("Gain (dB)" if extra else "Loop gain |T| (dB)", **_LABEL_STYLE)
            self.phase.getAxis("left").setLabel("Phase (°)" if extra else "Phase of T (°)", **_LABEL_STYLE)

    def _apply_pens(self) -> None:
        """Pens per corner: highlighted and worst corners heavier and on top, the rest dimmed while highlighting."""
        highlight = set(self._model.highlight)
        worst = self._worst
        pens = []
        for k in range(self._n):
            dim = bool(highlight) and k not in highlight and k != worst
            width = 2.0 if (k in highlight or k == worst) else 1.0
            pens.append(_pen(self._corner_colours[k], self._corner_styles[k], width, 55 if dim else 255))
        top = sorted(highlight) + ([worst] if 0 <= worst < self._n and worst not in highlight else [])
        order = [k for k in range(self._n) if k not in top] + top
        self.loop_mag.set_pens(pens, order)
        self.loop_phase.set_pens(pens, order)

    def _on_highlight_changed(self, corners) -> None:
        self._apply_pens()

    def _on_targets_changed(self, targets) -> None:
        x = hz_to_view(targets.fc_hz)
        if math.isfinite(x):
            with QSignalBlocker(self.marker):
                self.marker.setValue(x)
            self._marker_twin.setValue(x)
            self.marker.label.setFormat(f"target fc {format_value(targets.fc_hz, 'Hz')}")

    def _plant_pens(self) -> None:
        """The plant faint beside the loop; in full colour when it is all there is (targets not met)."""
        alpha = 255 if self._infeasible else 90
        pens = [_pen(self._corner_colours[k], self._corner_styles[k], 1.0, alpha) for k in range(self._n)]
        self.plant_mag.set_pens(pens)
        self.plant_phase.set_pens(pens)

    def _show_ghost(self, on: bool) -> None:
        """Show (or hide) the last feasible loop of this design, grey and dashed."""
        if on:
            mag, phase = self._last_loop
            pens = [_GHOST_PEN] * mag.shape[0]
            self.ghost_mag.set_data(self._x, mag)
            self.ghost_phase.set_data(self._x, phase)
            self.ghost_mag.set_pens(pens)
            self.ghost_phase.set_pens(pens)
        self._ghost_on = on
        self.ghost_mag.setVisible(on)
        self.ghost_phase.setVisible(on)

    def _set_infeasible(self, infeasible: bool) -> None:
        """Switch between the loop and the infeasible view (plant, last feasible loop, the reason)."""
        if infeasible == self._infeasible:
            return
        self._infeasible = infeasible
        self._plant_pens()
        plant = self._show_plant or infeasible
        self.plant_mag.setVisible(plant)
        self.plant_phase.setVisible(plant)
        self._show_ghost(infeasible and self._last_loop is not None)
        self._infeasible_text.setVisible(infeasible)
        self.loop_mag.setVisible(not infeasible)
        self.loop_phase.setVisible(not infeasible)
        self._comp_mag.setVisible(not infeasible and self._show_comp)
        self._comp_phase.setVisible(not infeasible and self._show_comp)
        if infeasible:
            for item in (self._pm_bar, self._pm_ref, self._gm_bar, self._fc_dot_mag, self._fc_dot_phase,
                         self._f180_dot, self._f180_dot_mag, self._pm_text, self._gm_text, self._gm_word):
                item.setVisible(False)
        self._fill_legend()

    def _on_results_changed(self, result) -> None:
        if result is None:
            return
        x = self._x
        feasible = result.feasible
        if not feasible:
            self._infeasible_text.setText(
                f"<b>No parts for these targets.</b> {html.escape(infeasible_reason(result))}<br>"
                f"<span style='color:#555'>Shown: the plant Gvd of every corner"
                f"{' and the last feasible loop (grey, dashed)' if self._last_loop is not None else ''}.</span>")
            self._set_infeasible(True)
            if self._fit_pending:
                self._fit(None, None)
            return
        self._set_infeasible(False)
        mag = magnitude_db(result.loop_resp)
        phase = result.loop_phase_deg
        self.loop_mag.set_data(x, mag)
        self.loop_phase.set_data(x, phase)
        self._last_loop = (mag, phase)
        if self._show_comp:
            # Gc itself, as ``loopkit bode --compensator`` prints it (the loop is T = -Tu Gc)
            self._comp_mag.setData(x, magnitude_db(result.comp_resp[0]), connect="finite")
            self._comp_phase.setData(x, result.compensator.phase_deg(result.f_hz)[0], connect="finite")
        w = result.worst_corner
        self._draw_worst(result, mag[w], phase[w])
        if self._fit_pending:
            self._fit(mag, phase)

    def _draw_worst(self, result, mag_w: np.ndarray, phase_w: np.ndarray) -> None:
        w = result.worst_corner
        x = self._x
        if w != self._worst:
            self._worst = w
            self._apply_pens()
        m = result.margins
        fc, pm, gm, f180 = (float(m.fc_hz[w]), float(m.pm_deg[w]), float(m.gm_db[w]), float(m.f180_hz[w]))
        xc = hz_to_view(fc)
        if math.isfinite(xc) and math.isfinite(pm):
            ph_fc = float(np.interp(xc, x, phase_w))  # display position only; the number is from loopkit
            ref = ph_fc - pm
            self._pm_bar.setData([xc, xc], [ref, ph_fc])
            self._pm_ref.setData([xc - 0.35, xc + 0.35], [ref, ref])
            self._fc_dot_mag.set_pos(xc, 0.0)
            self._fc_dot_phase.set_pos(xc, ph_fc)
            self._pm_text.setText(f"PM {pm:.1f}°\nfc {format_value(fc, 'Hz')}")
            self._place_label(self._pm_text, xc, (ref + ph_fc) / 2)
            for item in (self._pm_bar, self._pm_ref, self._fc_dot_mag, self._fc_dot_phase, self._pm_text):
                item.setVisible(True)
        else:
            for item in (self._pm_bar, self._pm_ref, self._fc_dot_mag, self._fc_dot_phase, self._pm_text):
                item.setVisible(False)
        state = str(gm_state(m)[w])
        x180 = hz_to_view(f180)
        # a marker only for a gain margin loopkit reports as a number (never at a phase crossover beyond fsw/2)
        if state == "number" and math.isfinite(x180) and math.isfinite(gm) and x180 <= self._x_half + 1e-9:
            self._gm_bar.setData([x180, x180], [-gm, 0.0])
            self._f180_dot_mag.set_pos(x180, -gm)
            self._f180_dot.set_pos(x180, float(np.interp(x180, x, phase_w)))
            self._gm_text.setText(f"GM {gm:.1f} dB")
            self._place_label(self._gm_text, x180, -gm / 2)
            for item in (self._gm_bar, self._f180_dot_mag, self._f180_dot, self._gm_text):
                item.setVisible(True)
            self._gm_word.setVisible(False)
        else:
            for item in (self._gm_bar, self._f180_dot_mag, self._f180_dot, self._gm_text):
                item.setVisible(False)
            word = GM_WORDS.get(state, GM_WORDS["none"])
            if self._gm_word_state != state:
                self._gm_word_state = state
                self._gm_word.setText(f"GM {word}")
                self._gm_word.setToolTip(GM_BEYOND_TIP if state == "beyond-model" else
                                         "The phase does not reach −180° with |T| < 1 below fsw/2")
            self._place_gm_word()
            self._gm_word.setVisible(True)

    def _place_gm_word(self) -> None:
        """At the fsw/2 edge, high in the plot where the loop gain is low (clear of the curves)."""
        (_, _), (y0, y1) = self.mag.getViewBox().viewRange()
        self._gm_word.setPos(self._x_half, y1 - 0.2 * (y1 - y0))

    def _place_label(self, item, x: float, y: float) -> None:
        """Put a marker label beside its bar: to the right, or to the left near the right edge."""
        lo, hi = self.mag.getViewBox().viewRange()[0]
        right_side = x < lo + 0.72 * (hi - lo)
        item.setAnchor((0.0, 0.5) if right_side else (1.0, 0.5))
        item.setPos(x + (0.04 if right_side else -0.04) * (hi - lo) / 5, y)

    def _fit(self, mag, phase) -> None:
        """Fit the axes (on a design change or on request); they stay fixed while targets move."""
        self._fit_pending = False
        x = self._x
        mags = [] if mag is None else [mag]
        phases = [] if phase is None else [phase]
        if self._show_plant:
            mags.append(magnitude_db(self._model.result.plant_resp))
            phases.append(self._plant_phase)
        if self._show_comp and self._model.result.feasible:
            mags.append(magnitude_db(self._model.result.comp_resp))
            phases.append(self._comp_phase.yData)
        lo_db, hi_db = -60.0, 60.0
        if mags:
            allm = np.concatenate([m.ravel() for m in mags])
            allm = allm[np.isfinite(allm)]
            if allm.size:
                lo_db = max(float(np.min(allm)), -120.0)
                hi_db = min(float(np.max(allm)), 140.0)
        lo_db, hi_db = math.floor(min(lo_db, -20.0) / 10) * 10 - 5, math.ceil(max(hi_db, 20.0) / 10) * 10 + 5
        lo_ph, hi_ph = -270.0, 0.0
        if phases:
            allp = np.concatenate([p.ravel() for p in phases])
            allp = allp[np.isfinite(allp)]
            if allp.size:
                lo_ph = math.floor(min(float(np.min(allp)), -180.0) / 45) * 45 - 10
                hi_ph = math.ceil(max(float(np.max(allp)), -90.0) / 45) * 45 + 10
        for plot in (self.mag, self.phase):
            plot.getViewBox().disableAutoRange()
        self.mag.setXRange(x[0], x[-1], padding=0.0)
        self.mag.setYRange(lo_db, hi_db, padding=0.0)
        self.phase.setYRange(lo_ph, hi_ph, padding=0.0)
        self._place_gm_word()

    # ------------------------------------------------------------------ marker -> model
    def _on_marker_position_changed(self, line) -> None:
        f = view_to_hz(line.value())
        self._marker_twin.setValue(line.value())
        self.marker_moved.emit(f)

    def _on_marker_position_change_finished(self, line) -> None:
        self.marker_released.emit(view_to_hz(line.value()))

    # ------------------------------------------------------------------ export
    def set_envelope(self, envelope: dict | None) -> None:
        """Shade the loop gain's envelope over a tolerance study's draws (``loopkit.montecarlo.loop_envelope``)
        behind the curves; None removes it.  It goes when the results change (it belongs to those parts)."""
        for plot, item in getattr(self, "_envelope_items", ()):
            plot.removeItem(item)
        self._envelope_items = []
        self.envelope = envelope
        if envelope is None:
            return
        if not getattr(self, "_envelope_hooked", False):
            self._model.results_changed.connect(lambda _result: self.set_envelope(None))
            self._envelope_hooked = True
        x = hz_to_view(envelope["f_hz"])
        pen = _pen("#8a8a8a", Qt.SolidLine, 1.0)
        for plot, lo, hi in ((self.mag, envelope["mag_db_min"], envelope["mag_db_max"]),
                             (self.phase, envelope["phase_deg_min"], envelope["phase_deg_max"])):
            low, high = pg.PlotCurveItem(x, lo, pen=pen), pg.PlotCurveItem(x, hi, pen=pen)
            fill = pg.FillBetweenItem(low, high, brush=pg.mkBrush(140, 140, 140, 60))
            for item in (fill, low, high):
                item.setZValue(-5)
                plot.addItem(item, ignoreBounds=True)
                self._envelope_items.append((plot, item))

    def export_image(self, path: str) -> None:
        """Write the plot to PNG or SVG (by the file's suffix) with pyqtgraph's exporters."""
        import pyqtgraph.exporters as ex

        if str(path).lower().endswith(".svg"):
            exporter = ex.SVGExporter(self.canvas.scene())
        else:
            exporter = ex.ImageExporter(self.canvas.scene())  # at screen scale: pyqtgraph does not scale the legend
        exporter.export(str(path))

