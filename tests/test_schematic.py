"""Network drawings: valid SVG, every part and value on it, rendered by Qt as an image.

No published reference applies to a drawing; these checks are structural (the SVG
parses, names and values are present, they change the output) and visual (Qt's
SVG renderer draws it offscreen). The designators drawn are checked against the
network modules' own DESIGNATORS / OPTIONAL_DESIGNATORS.
"""

from __future__ import annotations

import functools
import subprocess
import sys
import xml.etree.ElementTree as ET

import pytest

from loopkit.design import NETWORKS, OpAmp
from loopkit.errors import DesignError
from loopkit.networks import NetworkContext, network_module
from loopkit.schematic import network_svg
from loopkit.units import format_value

SVG_NS = "{http://www.w3.org/2000/svg}"
OPTO = {"ctr": 0.8, "r_pull": 4.7e3, "r_led": 1.5e3, "c_opto": 2.2e-9}

CASES = {  # network -> (parts, ctx); values typical of each network (demo values)
    "type1": ({"R1": 100e3, "Rb": 31.6e3, "C1": 4.7e-9}, NetworkContext(vref=0.8, v_sensed=3.3)),
    "type2": ({"R1": 100e3, "Rb": 31.6e3, "R2": 48.7e3, "C1": 10e-9, "C2": 220e-12},
              NetworkContext(vref=0.8, v_sensed=3.3)),
    "type3": ({"R1": 100e3, "Rb": 31.6e3, "R2": 48.7e3, "C1": 10e-9, "C2": 220e-12, "R3": 2.49e3, "C3": 3.3e-9},
              NetworkContext(vref=0.8, v_sensed=3.3)),
    "gm-type2": ({"R1": 110e3, "Rb": 10e3, "Rc": 24.9e3, "Cc": 6.8e-9, "Chf": 68e-12},
                 NetworkContext(opamp=OpAmp(gm=1e-3, r_out=10e6), vref=1.2, v_sensed=14.4)),
    "opto-type2": ({"R1": 47e3, "Rb": 12.4e3, "Rz": 56.2e3, "Cz": 3.3e-9, "Cpole": 1e-9},
                   NetworkContext(vref=2.5, v_sensed=12.0, opto=OPTO)),
}


@functools.cache
def drawn(network: str, outline_text: bool = True, with_values: bool = True) -> str:
    """The drawing of a case, made once per test session (a drawing takes 0.1-0.3 s of CPU)."""
    parts, ctx = CASES[network] if with_values else ({}, None)
    return network_svg(network, parts, ctx, outline_text=outline_text)


def texts(svg: str) -> list[str]:
    root = ET.fromstring(svg)
    return ["".join(t.itertext()) for t in root.iter(f"{SVG_NS}text")]


def unit_of(designator: str) -> str:
    return "Ω" if designator.startswith("R") else "F"


def test_all_networks_have_a_case():
    assert set(CASES) == set(NETWORKS)


@pytest.mark.parametrize("network", NETWORKS)
def test_svg_parses_and_text_is_outlined(network):
    parts, ctx = CASES[network]
    svg = drawn(network)
    root = ET.fromstring(svg)
    assert root.tag == f"{SVG_NS}svg"
    assert not list(root.iter(f"{SVG_NS}text"))  # text as outlines (Qt garbles schemdraw's text elements)
    assert len(list(root.iter(f"{SVG_NS}path"))) > 40
    assert network_svg(network, parts, ctx) == svg  # deterministic


@pytest.mark.parametrize("network", NETWORKS)
def test_every_part_designator_and_value_is_drawn(network):
    parts, ctx = CASES[network]
    module = network_module(network)
    found = texts(drawn(network, outline_text=False))
    for designator in module.DESIGNATORS + getattr(module, "OPTIONAL_DESIGNATORS", ()):
        assert designator in found, designator
        assert format_value(parts[designator], unit_of(designator)) in found, designator
    for node in ("in", "out"):
        assert node in found
    assert f"vref {ctx.vref:g} V" in found


def test_opto_context_values_are_drawn():
    found = texts(drawn("opto-type2", outline_text=False))
    for name, value in (("R_LED", "1.5kΩ"), ("Rpull", "4.7kΩ")):
        assert name in found and value in found
    joined = " ".join(found)
    assert "CTR 0.8" in joined and "Copto 2.2nF" in joined


def test_gm_amplifier_values_are_drawn():
    joined = " ".join(texts(drawn("gm-type2", outline_text=False)))
    assert "1mS" in joined and "10MΩ" in joined


@pytest.mark.parametrize("network", NETWORKS)
def test_values_change_the_outlines(network):
    """In outline mode the text cannot be searched, so check that a value leaving or changing changes the SVG."""
    parts, ctx = CASES[network]
    base = drawn(network)
    last = list(parts)[-1]  # the last part of each case is a capacitor in the feedback or pole position
    without = {k: v for k, v in parts.items() if k != last}
    assert network_svg(network, without, ctx) != base
    assert network_svg(network, {**parts, last: parts[last] * 2.2}, ctx) != base


def test_topology_without_values():
    for network in NETWORKS:
        found = texts(drawn(network, outline_text=False, with_values=False))
        module = network_module(network)
        for designator in module.DESIGNATORS + getattr(module, "OPTIONAL_DESIGNATORS", ()):
            assert designator in found
        assert not any(t.endswith(("Ω", "F")) for t in found), found


def test_divider_follows_the_context():
    ctx = NetworkContext(vref=0.8, v_sensed=3.3)
    # a part list without Rb shows the value the networks compute: R1 vref / (v_sensed - vref)
    found = texts(network_svg("type2", {"R1": 100e3, "R2": 10e3, "C1": 1e-9, "C2": 1e-11}, ctx, outline_text=False))
    assert "Rb" in found and format_value(100e3 * 0.8 / 2.5, "Ω") in found
    # no divider when the sensed voltage equals vref (differential sensing)
    same = NetworkContext(opamp=OpAmp(gm=1e-3), vref=1.2, v_sensed=1.2)
    found = texts(network_svg("gm-type2", {"R1": 10e3, "Rc": 1e4, "Cc": 1e-8, "Chf": 1e-10}, same, outline_text=False))
    assert "Rb" not in found


def test_opto_without_zero_resistor():
    parts, ctx = CASES["opto-type2"]
    no_rz = {k: v for k, v in parts.items() if k != "Rz"}
    found = texts(network_svg("opto-type2", no_rz, ctx, outline_text=False))
    assert "Rz" not in found and "Cz" in found


def test_unknown_network():
    with pytest.raises(DesignError) as err:
        network_svg("type4", {})
    assert err.value.field == "compensator.network"


def test_schemdraw_settings_restored():
    import schemdraw

    before = (schemdraw.svgconfig.text, schemdraw.svgconfig.svg2)
    network_svg("type2", {})
    assert (schemdraw.svgconfig.text, schemdraw.svgconfig.svg2) == before


def test_drawing_imports_neither_qt_nor_matplotlib():
    code = (
        "import sys; from loopkit.schematic import network_svg; network_svg('opto-type2', {}); "
        "bad = [m for m in sys.modules if m.split('.')[0] in ('PySide6', 'matplotlib', 'pyqtgraph')]; "
        "print(bad); sys.exit(1 if bad else 0)"
    )
    proc = subprocess.run([sys.executable, "-c", code], check=False, capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stdout + proc.stderr


# --------------------------------------------------------------------------- Qt renders it
def render(svg: str, scale: float = 1.5):
    from PySide6.QtCore import QByteArray, QRectF
    from PySide6.QtGui import QColor, QImage, QPainter
    from PySide6.QtSvg import QSvgRenderer

    renderer = QSvgRenderer(QByteArray(svg.encode()))
    assert renderer.isValid()
    size = renderer.defaultSize()
    assert size.width() > 100 and size.height() > 100
    image = QImage(int(size.width() * scale), int(size.height() * scale), QImage.Format.Format_RGB32)
    image.fill(QColor("white"))
    painter = QPainter(image)
    renderer.render(painter, QRectF(0, 0, image.width(), image.height()))
    painter.end()
    return image


def ink(image) -> int:
    """Number of non-white pixels."""
    import numpy as np

    bits = np.frombuffer(image.constBits(), dtype=np.uint32, count=image.sizeInBytes() // 4)
    rows = bits.reshape(image.height(), image.bytesPerLine() // 4)[:, : image.width()]
    return int(np.count_nonzero(rows != 0xFFFFFFFF))


@pytest.mark.gui
@pytest.mark.parametrize("network", NETWORKS)
def test_qt_renders_the_drawing(qapp, network, tmp_path):
    image = render(drawn(network))
    assert not image.isNull()
    assert image.save(str(tmp_path / f"{network}.png"))
    dark = ink(image)
    assert dark > 0.01 * image.width() * image.height()
    # the values are drawn as ink too: the drawing without them has less
    bare = render(drawn(network, with_values=False))
    assert ink(bare) < dark
