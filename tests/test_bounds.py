"""Bounds at the door, size limits, and the CLI's standard output.

The ranges are loopkit's own choice (common practice, no source; each argued in
loopkit/bounds.py).  What these tests hold to: a value outside its range is a
DesignError naming the field, the value and the range; a value inside gives
either such an error naming a field or finite results; the kinds of failure
found by a generated-input run (a boost with ``inductance = "1.5n"`` ending in
numpy's LinAlgError, a load near zero, huge gains, ramps, divider resistors and
turns ratios overflowing inside the networks and the flyback, errors blaming a
field nobody wrote, messages echoing a megabyte) each stay fixed.  The ideal
flyback duty D = n Vout / (Vin + n Vout) used for the turns-ratio check follows
from M = D / (n (1 - D)) (Erickson & Maksimović, *Fundamentals of Power
Electronics*, 2nd ed., 2001, ch. 6, flyback; from memory).
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import threading
from pathlib import Path

import pytest
from test_fuzz_designs import BASES, OPTO, check_document, toml_text

from loopkit.bounds import BOUNDS, MAX_CORNERS, MAX_FILE_BYTES, bound_for, bounds_markdown
from loopkit.designfile import load_design, loads_design
from loopkit.errors import DesignError, DesignFileError
from loopkit.loop import LoopSession

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = {p.stem: p for p in (ROOT / "sample_designs").glob("*.toml")}


def text_of(sample: str, *changes: tuple[str, str]) -> str:
    text = SAMPLE[sample].read_text(encoding="utf-8")
    for old, new in changes:
        assert old in text, old
        text = text.replace(old, new, 1)
    return text


def refusal(text: str) -> DesignError:
    with pytest.raises(DesignError) as err:
        LoopSession(loads_design(text, "x.toml")).run()
    assert type(err.value) is not ValueError
    return err.value


# ------------------------------------------------------------ the one table
def test_readme_table_is_the_code_table():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    m = re.search(r"<!-- bounds table: [^>]*-->\n(.*?)<!-- end of bounds table -->", readme, re.DOTALL)
    assert m, "README has no bounds table"
    assert m.group(1) == bounds_markdown()


def test_every_numeric_field_has_a_bound():
    from dataclasses import fields

    from loopkit.design import (
        FILE_KEYS,
        CapacitorBank,
        Compensator,
        Control,
        Modulator,
        OpAmp,
        Operating,
        Sensing,
        Stage,
    )

    sections = {
        "stage": Stage, "stage.output_caps": CapacitorBank, "operating": Operating, "sensing": Sensing,
        "modulator": Modulator, "compensator": Compensator, "compensator.opamp": OpAmp, "control": Control,
    }
    not_numbers = {"topology", "output_caps", "rectifier", "light_load", "kind", "feedforward", "network", "method",
                   "design_corner", "resistor_series", "capacitor_series", "parts", "placement", "opamp", "opto",
                   "scheme"}
    for where, cls in sections.items():
        for f in fields(cls):
            if f.name not in not_numbers:
                key = FILE_KEYS.get(f.name, f.name)  # bounds are named by the design file's keys
                assert bound_for(f"{where}.{key}") is not None, f"{where}.{key}"
    for key in ("ctr", "r_pull", "r_led", "c_opto"):
        assert bound_for(f"compensator.opto.{key}") is not None
    for key in ("R1", "Rb", "Rz", "C1", "Cpole", "Chf"):
        assert bound_for(f"compensator.parts.{key}") is not None
    assert bound_for("compensator.placement.fz1") is not None


# field in the buck sample -> how to write a value there
BUCK_FIELDS = {
    "stage.fsw": ('fsw = "400k"', 'fsw = "{}"'),
    "stage.inductance": ('inductance = "4.7u"', 'inductance = "{}"'),
    "stage.dcr": ('dcr = "14m"', 'dcr = "{}"'),
    "stage.output_caps[0].capacitance": ('capacitance = "22u"', 'capacitance = "{}"'),
    "stage.output_caps[0].esr": ('esr = "3m"', 'esr = "{}"'),
    "operating.vout": ('vout = "3.3"', 'vout = "{}"'),
    "operating.load[0]": ('load = ["0.3", "1.5", "3"]', 'load = ["{}"]'),
    "operating.vin[0]": ('vin = ["18", "24", "32"]\nvin_nominal = "24"', 'vin = ["{}"]'),
    "sensing.reference": ('reference = "0.8"', 'reference = "{}"'),
    "sensing.r_top": ('r_top = "49.9k"', 'r_top = "{}"'),
    "modulator.ramp": ('ramp = "1.2"', 'ramp = "{}"'),
    "compensator.fc": ('fc = "40k"', 'fc = "{}"'),
}


@pytest.mark.parametrize("field", sorted(BUCK_FIELDS))
@pytest.mark.parametrize("factor", [1e-3, 1e3])
def test_a_value_beyond_its_range_is_refused_with_field_value_and_range(field, factor):
    bound = bound_for(field)
    value = (bound.lo if factor < 1 else bound.hi) * factor
    if value == 0:
        value = -1e-3  # a range starting at 0: below it is negative
    old, new = BUCK_FIELDS[field]
    err = refusal(text_of("buck_24v_3v3", (old, new.format(f"{value:g}"))))
    assert err.field == field
    assert bound.allowed() in str(err)
    assert f"{value:g}" in str(err)


@pytest.mark.parametrize("name", sorted(BOUNDS))
def test_both_ends_of_every_range_give_a_refusal_by_field_or_finite_results(name):
    """Each field at each end of its range, on the samples, over all five networks."""
    bound = BOUNDS[name]
    ends = (bound.lo, bound.hi) if not bound.open_ends else (bound.lo + 1e-6, bound.hi - 1e-6)
    networks = ("type1", "type2", "type3", "gm-type2", "opto-type2")
    for i, base in enumerate(BASES):
        for value in ends:
            doc = _with(base, name, value, networks[i % len(networks)])
            assert check_document(doc) in ("refused", "finite")


def _with(base: dict, name: str, value: float, network: str) -> dict:
    import copy

    doc = copy.deepcopy(base)
    comp = doc.setdefault("compensator", {})
    comp["network"] = network
    if network == "opto-type2":
        comp.setdefault("opto", dict(OPTO))
    if network == "gm-type2":
        comp.setdefault("opamp", {}).setdefault("gm", "1m")
    path = name.split(".")
    if name.startswith("compensator.parts."):
        path = ["compensator", "parts", "R1" if name.endswith("R*") else "C1"]
    if name.startswith("compensator.placement"):
        path = ["compensator", "placement", "fz"]
        comp["method"] = "placement"
    node = doc
    for p in path[:-1]:
        node = node.setdefault(p, {})
        node = node[0] if isinstance(node, list) else node
    if path[-1] in ("vin", "load"):
        node.pop(f"{path[-1]}_min", None), node.pop(f"{path[-1]}_max", None), node.pop(f"{path[-1]}_points", None)
        value = [value]
    elif path[-1] == "vout" and doc["stage"]["topology"] == "inverting-buck-boost":
        value = -value
    node[path[-1]] = int(value) if name.endswith("count") else value
    return doc


# ------------------------------------------------------------ the kinds found by the generated-input run
def test_boost_with_a_nanohenry_slip_is_refused_naming_the_inductance():
    """Was numpy's LinAlgError ("Array must not contain infs or NaNs") from `loopkit stage` and `design`."""
    text = text_of("boost_liion_5v", ('inductance = "1.5u"', 'inductance = "1.5n"'))
    err = refusal(text)
    assert err.field == "stage.inductance" and "1.5nH" in str(err)
    assert "raise the inductance" in str(err)


def test_a_load_near_zero_is_refused_by_its_range():
    """Was "poly_roots_inverse needs a nonzero constant term" from inside the DCM model."""
    err = refusal(text_of("buck_diode_12v_5v", ('load = ["0.05", "0.5", "1"]', 'load = ["1e-12", "0.5", "1"]')))
    assert err.field == "operating.load[0]" and "from 10µA to 10kA" in str(err)
    # at the floor itself the DCM model still gives finite numbers
    floor = text_of("buck_diode_12v_5v", ('load = ["0.05", "0.5", "1"]', 'load = ["10u", "0.5", "1"]'))
    assert check_document(__import__("tomllib").loads(floor)) in ("finite", "refused")


@pytest.mark.parametrize("sample, change, field", [
    # huge open-loop gain (was OverflowError in the op-amp algebra)
    ("buck_24v_3v3", ('pm = 60', 'pm = 60\n[compensator.opamp]\ngain_db = 1e6\ngbw = "10M"'), "compensator.opamp.gain_db"),
    # huge ramp and tiny ramp (a tiny one blamed compensator.placement.gain = nan)
    ("buck_24v_3v3", ('ramp = "1.2"', 'ramp = "1e9"'), "modulator.ramp"),
    ("buck_24v_3v3", ('ramp = "1.2"', 'ramp = "1e-15"'), "modulator.ramp"),
    # huge divider resistor (was OverflowError / ZeroDivisionError in Type I and Type III)
    ("buck_24v_3v3", ('r_top = "49.9k"', 'r_top = "1e30"'), "sensing.r_top"),
    # huge turns ratio (was ZeroDivisionError in the flyback stage)
    ("flyback_48v_12v", ("turns_ratio = 2.5", "turns_ratio = 1e12"), "stage.turns_ratio"),
    # huge gm (blamed compensator.parts.Rc = 0.0)
    ("solar_charger_14v4", ('gm = "1m"', "gm = 1e9"), "compensator.opamp.gm"),
    # huge optocoupler CTR
    ("flyback_48v_12v", ("ctr = 0.5", "ctr = 1e20"), "compensator.opto.ctr"),
])
def test_huge_and_tiny_values_are_refused_naming_the_field_written(sample, change, field):
    text = SAMPLE[sample].read_text(encoding="utf-8")
    if change[0] not in text:  # the sample has its own [compensator.opamp]: set the value there
        pytest.skip(f"{sample} has no {change[0]!r}")
    err = refusal(text.replace(change[0], change[1], 1))
    assert err.field == field, str(err)
    assert "must be" in str(err)


def test_turns_ratio_against_duty():
    # 12 V out: n = 100 from 36 V asks for D = 1200 / 1236 = 0.971 (allowed); from 1 V for D = 1200 / 1201 =
    # 0.99917 (refused: above 0.999)
    import dataclasses

    design = loads_design(text_of("flyback_48v_12v", ("turns_ratio = 2.5", "turns_ratio = 100")))
    assert design.stage.turns_ratio == 100
    with pytest.raises(DesignError, match=r"stage.turns_ratio = 100: gives a duty of 0.999 at 1V in"):
        dataclasses.replace(design, operating=dataclasses.replace(design.operating, vin=(1.0,), vin_nominal=None))


def test_crossover_at_or_above_half_fsw_is_refused():
    design = loads_design(text_of("buck_24v_3v3", ('fc = "40k"', 'fc = "200k"')))
    result = LoopSession(design).run()
    assert not result.feasible
    assert any("below half the switching frequency (200kHz)" in f.message for f in result.findings)


def test_divider_current_that_needs_an_impossible_resistor_is_refused():
    text = text_of("flyback_48v_12v", ('reference = "2.5"', 'reference = "2.5"\ndivider_current = "10n"'))
    err = refusal(text)
    assert err.field == "sensing.divider_current" and "R1 = 950MΩ" in str(err)


def test_placement_gain_is_not_a_key_and_is_not_documented():
    text = text_of("buck_24v_3v3", ('pm = 60', 'pm = 60\nmethod = "placement"\n[compensator.placement]\ngain = 3'))
    err = refusal(text)
    assert err.field == "compensator.placement.gain" and "unknown key" in str(err)
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    bullet = readme[readme.index("- `[compensator.placement]`"):]
    bullet = bullet[: bullet.index("\n- ")]
    assert "`gain`" not in bullet


@pytest.mark.parametrize("value", ["1" * 1_000_000, "2\n3", "x\r\ty\x1b[31m"])
def test_messages_echo_a_short_flat_value(value):
    text = text_of("buck_24v_3v3", ('ramp = "1.2"', f"ramp = {toml_text({'v': value}).split(' = ', 1)[1].strip()}"))
    err = refusal(text)
    message = str(err)
    assert "\n" not in message and "\r" not in message and "\x1b" not in message
    assert len(message) < 200
    assert err.field == "modulator.ramp"


# ------------------------------------------------------------ sizes
def test_corner_cap_says_how_to_sweep_more():
    text = text_of("buck_24v_3v3", ('vin = ["18", "24", "32"]\nvin_nominal = "24"',
                                    'vin_min = "18"\nvin_max = "32"\nvin_points = 1000'),
                   ('load = ["0.3", "1.5", "3"]', 'load_min = "0.3"\nload_max = "3"\nload_points = 1000'))
    err = refusal(text)
    assert f"at most {MAX_CORNERS} corners" in str(err) and "chunks" in str(err)
    assert "1000 input voltages x 1000 loads = 1000000 corners" in str(err)


def test_file_larger_than_the_cap_is_refused(tmp_path):
    big = tmp_path / "big.toml"
    big.write_text("# " + "x" * MAX_FILE_BYTES + "\n")
    with pytest.raises(DesignFileError, match=r"big\.toml: \(file\): is larger than 1 MiB"):
        load_design(big)
    with pytest.raises(DesignFileError, match="is larger than 1 MiB"):
        loads_design("# " + "x" * MAX_FILE_BYTES)


def test_deeply_nested_toml_is_refused():
    """Was a RecursionError from the TOML reader."""
    for text in ("x = " + "[" * 100_000 + "]" * 100_000, "x = " + "{a = " * 50_000 + "1" + "}" * 50_000):
        with pytest.raises(DesignFileError, match="nested too deeply|not valid TOML"):
            loads_design(text, "deep.toml")


def _in_time(fn, seconds: float = 10.0):
    box = {}

    def run():
        try:
            fn()
        except BaseException as exc:  # noqa: BLE001 - handed to the test thread
            box["exc"] = exc

    t = threading.Thread(target=run, daemon=True)
    t.start()
    t.join(seconds)
    assert not t.is_alive(), "load_design hung"
    return box.get("exc")


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no FIFOs here")
def test_fifo_and_device_are_refused_at_once(tmp_path):
    fifo = tmp_path / "pipe.toml"
    os.mkfifo(fifo)
    exc = _in_time(lambda: load_design(fifo))
    assert isinstance(exc, DesignFileError) and "not a regular file" in str(exc)
    exc = _in_time(lambda: load_design("/dev/zero"))
    assert isinstance(exc, DesignFileError) and "not a regular file" in str(exc)
    exc = _in_time(lambda: load_design(tmp_path))
    assert isinstance(exc, DesignFileError) and "folder" in str(exc)


# ------------------------------------------------------------ the CLI's standard output
def _cli(args: str, shell_tail: str = "") -> subprocess.CompletedProcess:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    cmd = f"{sys.executable} -c 'import sys; from loopkit.cli import main; sys.exit(main())' {args} {shell_tail}"
    return subprocess.run(["bash", "-c", cmd], capture_output=True, text=True, env=env, timeout=120, cwd=ROOT, check=False)


@pytest.mark.parametrize("command", ["stage", "design", "bode"])
def test_closed_stdout_is_one_line_and_status_2(command):
    done = _cli(f"{command} sample_designs/buck_24v_3v3.toml", ">&-")
    assert done.returncode == 2
    assert "Traceback" not in done.stderr
    assert done.stderr.strip().splitlines() == ["loopkit: error: standard output is closed: there is nowhere to write"]


@pytest.mark.parametrize("command", ["stage", "design", "bode --points 20000"])
def test_broken_pipe_ends_quietly(command):
    done = _cli(f"{command} sample_designs/buck_24v_3v3.toml", "| head -c 10 >/dev/null; exit ${PIPESTATUS[0]}")
    assert "Traceback" not in done.stderr and "Exception" not in done.stderr, done.stderr
    assert done.stderr == ""
    assert done.returncode == 0


def test_full_disk_on_stdout_is_one_line():
    if not Path("/dev/full").exists():
        pytest.skip("no /dev/full")
    done = _cli("stage sample_designs/buck_24v_3v3.toml", ">/dev/full")
    assert done.returncode == 2
    assert done.stderr.strip().splitlines() == [
        "loopkit stage: error: cannot write the standard output: No space left on device"
    ]
