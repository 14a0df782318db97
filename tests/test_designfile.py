"""The design file: loading, validation messages, exact round trips, atomic saving.

The format is loopkit's own (documented in loopkit/designfile.py and the README);
the expectations here are that specification.  Physical facts used: a buck's
conversion ratio M = D <= 1 and a boost's M = 1/(1 - D) >= 1 (Erickson &
Maksimović, *Fundamentals of Power Electronics*, 2nd ed., 2001, ch. 2 and
Table 8.2 [M], from memory), so a buck cannot make 12 V from 9 V and a boost
cannot make 5 V from 6 V; an inverting buck-boost has M = -D/(1 - D) < 0 (same
table).  The texts below are test inputs of our own, not check values.
"""

from __future__ import annotations

import dataclasses
import os
import stat
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from loopkit import analyse_stage, designfile
from loopkit.design import CapacitorBank, Design
from loopkit.designfile import design_from_dict, design_to_dict, dumps_design, load_design, loads_design, save_design
from loopkit.errors import DesignError, DesignFileError

SAMPLES = sorted((Path(__file__).resolve().parents[1] / "sample_designs").glob("*.toml"))

BUCK = """\
format = "loopkit-design"
version = 1
title = "test buck"

[stage]
topology = "buck"
fsw = "400k"
inductance = "4.7u"
dcr = "14m"
r_switch = "25m"
rectifier = "synchronous"
r_rectifier = "10m"

[[stage.output_caps]]
capacitance = "22u"
esr = "3m"
count = 4

[operating]
vout = "3.3"
vin_min = "18"
vin_max = "32"
vin_points = 3
load = ["0.3", "1.5", "3"]

[sensing]
reference = "0.8"
r_top = "49.9k"

[compensator]
network = "type2"
fc = "40k"
pm = 60
"""

INVERTING = """\
[stage]
topology = "inverting-buck-boost"
fsw = "500k"
inductance = "22u"
rectifier = "diode"
diode_drop = "0.45"
[[stage.output_caps]]
capacitance = "10u"
[operating]
vout = "-15"
vin = ["9", "18"]
load = ["0.03", "0.3"]
[sensing]
kind = "differential"
reference = "1.25"
"""


def edit(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


def error_of(text: str, file: str = "buck.toml") -> DesignFileError:
    with pytest.raises(DesignFileError) as err:
        loads_design(text, file)
    return err.value


# ------------------------------------------------------------ the sample designs
def test_there_are_samples_for_every_topology():
    topologies = {load_design(p).stage.topology for p in SAMPLES}
    assert topologies == {"buck", "boost", "inverting-buck-boost", "four-switch-buck-boost", "flyback"}


def test_every_sample_loads(sample_path):
    d = load_design(sample_path)
    assert isinstance(d, Design)
    assert d.title
    assert d.operating.n_corners >= 2


def test_every_sample_round_trips_exactly(sample_path, tmp_path):
    d = load_design(sample_path)
    text = dumps_design(d)
    assert loads_design(text) == d
    assert dumps_design(loads_design(text)) == text  # stable: writing twice gives the same text
    out = tmp_path / sample_path.name
    save_design(d, out)
    assert load_design(out) == d
    assert design_from_dict(design_to_dict(d)) == d


def test_every_sample_analyses(sample_path):
    # the samples describe stages that can make their output at every corner
    result = analyse_stage(load_design(sample_path))
    assert result.n_corners == load_design(sample_path).operating.n_corners


# ------------------------------------------------------------ round trips with changed values
SAMPLE_DESIGNS = [load_design(p) for p in SAMPLES]
positive = st.floats(min_value=1e-12, max_value=1e9, allow_nan=False, allow_infinity=False)


def within(field: str):
    """Floats over the whole range loopkit.bounds allows for ``field``."""
    from loopkit.bounds import bound_for

    b = bound_for(field)
    return st.floats(min_value=b.lo, max_value=b.hi, exclude_min=b.open_ends, exclude_max=b.open_ends)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    base=st.sampled_from(SAMPLE_DESIGNS),
    inductance=within("stage.inductance"),
    fsw=within("stage.fsw"),
    dcr=within("stage.dcr"),
    esr=within("stage.output_caps.esr"),
    capacitance=within("stage.output_caps.capacitance"),
    vout=st.floats(min_value=0.1, max_value=100.0),  # with vin, keeps the flyback's duty within 0.001 .. 0.999
    vin=st.lists(st.floats(min_value=0.5, max_value=100.0), min_size=1, max_size=5),
    load=st.lists(within("operating.load"), min_size=1, max_size=4),
    pm=within("compensator.pm"),
    ramp=within("modulator.ramp"),
    r_parts=st.dictionaries(st.sampled_from(["R1", "R2", "R3", "Rb"]), within("compensator.parts.R*"), max_size=4),
    c_parts=st.dictionaries(st.sampled_from(["C1", "C2", "C3"]), within("compensator.parts.C*"), max_size=3),
    title=st.text(max_size=40),
)
def test_round_trip_after_changing_values(
    base, inductance, fsw, dcr, esr, capacitance, vout, vin, load, pm, ramp, r_parts, c_parts, title
):
    parts = {**r_parts, **c_parts}
    fc = base.compensator.fc if base.compensator.fc < fsw / 2 else 0.0
    sign = -1.0 if base.stage.topology == "inverting-buck-boost" else 1.0
    d = dataclasses.replace(
        base,
        title=title,
        stage=dataclasses.replace(
            base.stage,
            inductance=inductance,
            fsw=fsw,
            dcr=dcr,
            output_caps=(CapacitorBank(capacitance, esr, 3),) + base.stage.output_caps[1:],
        ),
        operating=dataclasses.replace(
            base.operating, vout=sign * vout, vin=tuple(vin), load=tuple(load), vin_nominal=None
        ),
        modulator=dataclasses.replace(base.modulator, ramp=ramp),
        compensator=dataclasses.replace(base.compensator, pm=pm, parts=parts, fc=fc),
    )
    text = dumps_design(d)
    assert loads_design(text) == d


def test_titles_with_quotes_newlines_and_control_characters_round_trip():
    base = loads_design(BUCK)
    for title in ['say "hi"', "back\\slash", "two\nlines", "tab\there", "bell\x07", "del\x7f", "µΩ—ü", "'"]:
        d = dataclasses.replace(base, title=title)
        assert loads_design(dumps_design(d)).title == title


def test_part_designators_that_are_not_bare_keys_round_trip():
    base = loads_design(BUCK)
    d = dataclasses.replace(base, compensator=dataclasses.replace(base.compensator, parts={"R 1": 1e3, "C.2": 1e-9}))
    assert loads_design(dumps_design(d)) == d


# ------------------------------------------------------------ what a saved file holds
def _written(design: Design) -> dict:
    return tomllib.loads(dumps_design(design))


def test_irrelevant_defaults_are_left_out():
    doc = _written(loads_design(BUCK))  # synchronous buck, divider, type2
    for key in ("turns_ratio", "buck_max_duty", "boost_min_duty", "diode_drop"):
        assert key not in doc["stage"]
    assert "diff_bandwidth" not in doc["sensing"]
    assert "boost_split" not in doc["compensator"]
    assert set(doc["compensator"]["opamp"]) == {"gain_db", "gbw"}  # an op-amp network: gm, r_out unused
    # relevant fields stay, defaults or not
    for key in ("topology", "fsw", "inductance", "dcr", "r_switch", "rectifier", "r_rectifier", "light_load"):
        assert key in doc["stage"]
    assert {"kind", "reference", "r_top", "divider_current"} <= set(doc["sensing"])
    assert {"ramp", "max_duty", "feedforward"} <= set(doc["modulator"])


def test_fields_that_apply_are_written_even_at_their_default():
    base = loads_design(BUCK)
    flyback = dataclasses.replace(
        base, stage=dataclasses.replace(base.stage, topology="flyback", rectifier="diode", light_load="dcm")
    )
    doc = _written(flyback)
    assert doc["stage"]["turns_ratio"] == 1.0 and doc["stage"]["diode_drop"] == "0"
    four = dataclasses.replace(base, stage=dataclasses.replace(base.stage, topology="four-switch-buck-boost"))
    assert {"buck_max_duty", "boost_min_duty"} <= set(_written(four)["stage"])
    type3 = dataclasses.replace(base, compensator=dataclasses.replace(base.compensator, network="type3"))
    assert _written(type3)["compensator"]["boost_split"] == 0.5
    gm = dataclasses.replace(base, compensator=dataclasses.replace(base.compensator, network="gm-type2"))
    assert set(_written(gm)["compensator"]["opamp"]) == {"gm", "r_out"}  # gain_db, gbw unused by a gm amplifier


def test_non_default_values_are_written_even_where_irrelevant():
    base = loads_design(BUCK)
    d = dataclasses.replace(base, stage=dataclasses.replace(base.stage, turns_ratio=2.0, diode_drop=0.4))
    doc = _written(d)
    assert doc["stage"]["turns_ratio"] == 2.0 and doc["stage"]["diode_drop"] == "0.4"
    assert loads_design(dumps_design(d)) == d


def test_values_are_written_in_engineering_notation():
    doc = _written(loads_design(BUCK))
    assert doc["stage"]["fsw"] == "400k"
    assert doc["stage"]["inductance"] == "4.7u"
    assert doc["stage"]["dcr"] == "14m"
    assert doc["operating"]["vin"] == ["18", "25", "32"]
    assert doc["operating"]["load"] == ["0.3", "1.5", "3"]
    assert doc["sensing"]["r_top"] == "49.9k"
    assert doc["compensator"]["pm"] == 60.0  # dimensionless: a TOML number


# ------------------------------------------------------------ atomic saving
def _listing(directory) -> list[str]:
    return sorted(os.listdir(directory))


def test_save_replaces_and_leaves_no_temporary(tmp_path):
    path = tmp_path / "d.toml"
    path.write_text("old content\n")
    save_design(loads_design(BUCK), path)
    assert _listing(tmp_path) == ["d.toml"]
    assert load_design(path) == loads_design(BUCK)


@pytest.mark.parametrize("where", ["write", "fsync", "replace", "interrupt"])
def test_failure_mid_save_keeps_the_old_file(tmp_path, monkeypatch, where):
    path = tmp_path / "d.toml"
    path.write_text("old content\n")
    real_fdopen = os.fdopen

    class HalfWriter:
        """A file that writes half the text, then reports a full disk."""

        def __init__(self, fh):
            self.fh = fh

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            self.fh.close()

        def write(self, text):
            self.fh.write(text[: len(text) // 2])
            self.fh.flush()
            raise OSError(28, "No space left on device")

        def __getattr__(self, name):
            return getattr(self.fh, name)

    def fail(*args, **kwargs):
        raise OSError(5, "Input/output error")

    def interrupt(*args, **kwargs):
        raise KeyboardInterrupt

    if where == "write":
        monkeypatch.setattr(designfile.os, "fdopen", lambda *a, **k: HalfWriter(real_fdopen(*a, **k)))
    elif where == "fsync":
        monkeypatch.setattr(designfile.os, "fsync", fail)
    elif where == "replace":
        monkeypatch.setattr(designfile.os, "replace", fail)
    else:
        monkeypatch.setattr(designfile.os, "fsync", interrupt)
    with pytest.raises(KeyboardInterrupt if where == "interrupt" else OSError):
        save_design(loads_design(BUCK), path)
    monkeypatch.undo()
    assert path.read_text() == "old content\n"
    assert _listing(tmp_path) == ["d.toml"]


@pytest.mark.skipif(os.name != "posix", reason="POSIX permissions")
def test_save_keeps_permissions_and_follows_links(tmp_path):
    path = tmp_path / "d.toml"
    path.write_text("old\n")
    os.chmod(path, 0o640)
    save_design(loads_design(BUCK), path)
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o640
    umask = os.umask(0)
    os.umask(umask)
    fresh = tmp_path / "new.toml"
    save_design(loads_design(BUCK), fresh)
    assert stat.S_IMODE(os.stat(fresh).st_mode) == 0o666 & ~umask
    link = tmp_path / "link.toml"
    link.symlink_to(path)
    d = dataclasses.replace(loads_design(BUCK), title="via link")
    save_design(d, link)
    assert link.is_symlink()
    assert load_design(path).title == "via link"


# ------------------------------------------------------------ error messages
ERRORS = [
    # (change to BUCK, field, value as written, words of what is allowed)
    (('inductance = "4.7u"', 'inductance = "-22u"'), "stage.inductance", "-22u", "must be > 0"),
    (('inductance = "4.7u"', 'inductance = "0"'), "stage.inductance", "0", "must be > 0"),
    (
        ('dcr = "14m"', 'dcrr = "14m"'),
        "stage.dcrr",
        "14m",
        "unknown key; allowed here: boost_min_duty, buck_max_duty, dcr,",
    ),
    (('fsw = "400k"', 'fsw = "1..2"'), "stage.fsw", "1..2", "not a number; expected e.g. 22u"),
    (('fsw = "400k"', 'fsw = "400kH"'), "stage.fsw", "400kH", "expected a value in Hz, not 'H'"),
    (('fsw = "400k"', "fsw = true"), "stage.fsw", "True", "expected a number, not true/false"),
    (
        ('topology = "buck"', 'topology = "Buck"'),
        "stage.topology",
        "Buck",
        "must be one of buck, boost, inverting-buck-boost",
    ),
    (('rectifier = "synchronous"', 'rectifier = "schottky"'), "stage.rectifier", "schottky", "synchronous or diode"),
    (
        ('rectifier = "synchronous"', 'rectifier = "diode"\nlight_load = "forced-ccm"'),
        "stage.light_load",
        "forced-ccm",
        "a diode cannot conduct backwards",
    ),
    (('esr = "3m"', 'esr = "3mH"'), "stage.output_caps[0].esr", "3mH", "expected a value in ohm"),
    (('esr = "3m"', 'esr = "-3m"'), "stage.output_caps[0].esr", "-3m", "must be >= 0"),
    (("count = 4", "count = 0"), "stage.output_caps[0].count", "0", "whole number >= 1"),
    (("count = 4", "count = 4.5"), "stage.output_caps[0].count", "4.5", "whole number >= 1"),
    (
        ('esr = "3m"', 'esr = "3m"\nvoltage = "6.3"'),
        "stage.output_caps[0].voltage",
        "6.3",
        "unknown key; allowed here: capacitance, count, esr",
    ),
    (
        ('[[stage.output_caps]]\ncapacitance = "22u"\nesr = "3m"\ncount = 4\n', ""),
        "stage.output_caps",
        "(missing)",
        "at least one [[stage.output_caps]]",
    ),
    (('inductance = "4.7u"\n', ""), "stage.inductance", "(missing)", "is required"),
    (("vin_points = 3", "vin_points = 1"), "operating.vin_points", "1", "whole number from 2 to 1000"),
    (("vin_points = 3", "vin_points = true"), "operating.vin_points", "True", "whole number from 2 to 1000"),
    (("vin_points = 3", 'vin_points = 3\nvin = ["12"]'), "operating.vin_min", "18", "give either vin = [...] or"),
    (('vin_max = "32"', 'vin_max = "12"'), "operating.vin_max", "12", "must be >= operating.vin_min (18)"),
    (
        ('vin_max = "32"', 'vin_max = "32"\nvin_nominal = "40"'),
        "operating.vin_nominal",
        "40",
        "within vin_min .. vin_max (18V .. 32V)",
    ),
    (('vin_min = "18"\n', ""), "operating.vin", "(missing)", "give a list vin = [...] or vin_min and vin_max"),
    (('vout = "3.3"\n', ""), "operating.vout", "(missing)", "is required"),
    (('vout = "3.3"', 'vout = "-3.3"'), "operating.vout", "-3.3", "a buck makes a positive output: give vout > 0"),
    (('load = ["0.3", "1.5", "3"]', 'load = ["0.3", "-1.5", "3"]'), "operating.load[1]", "-1.5", "must be > 0"),
    (('load = ["0.3", "1.5", "3"]', "load = []"), "operating.load", "[]", "at least one load current"),
    (('vout = "3.3"', 'vout = "3.3"\niout = "3"'), "operating.iout", "3", "unknown key; allowed here: load, load_max,"),
    (
        ('reference = "0.8"', 'reference = "0.8"\nkind = "optical"'),
        "sensing.kind",
        "optical",
        "divider or differential",
    ),
    (("pm = 60", "pm = 200"), "compensator.pm", "200", "between 0 and 180 deg"),
    (("pm = 60", "pm = 60\ndesign_corner = 99"), "compensator.design_corner", "99", "must be below 9"),
    (("pm = 60", 'pm = 60\ndesign_corner = "best"'), "compensator.design_corner", "best", "'worst' or a corner index"),
    (("pm = 60", 'pm = 60\nresistor_series = "E25"'), "compensator.resistor_series", "E25", "E6, E12, E24, E48, E96"),
    (('network = "type2"', 'network = "type4"'), "compensator.network", "type4", "must be one of type1, type2, type3"),
    (
        ("pm = 60", 'pm = 60\n[compensator.parts]\nR1 = "10nF"'),
        "compensator.parts.R1",
        "10nF",
        "expected a value in ohm, not 'F'",
    ),
    (("pm = 60", 'pm = 60\n[compensator.parts]\nC1 = "-1n"'), "compensator.parts.C1", "-1n", "must be > 0"),
    (
        ("pm = 60", 'pm = 60\n[compensator.opto]\nr_pul = "10k"'),
        "compensator.opto.r_pul",
        "10k",
        "unknown key; allowed here: c_opto, ctr, r_led, r_pull",
    ),
    (
        ("pm = 60", 'pm = 60\n[compensator.placement]\nfz0 = "1k"'),
        "compensator.placement.fz0",
        "1k",
        "unknown key; allowed here: fp, fp1, fp2, fz, fz1, fz2",
    ),
    (
        ("pm = 60", 'pm = 60\n[compensator.placement]\nfz = "1kV"'),
        "compensator.placement.fz",
        "1kV",
        "expected a value in Hz",
    ),
    (("pm = 60", 'pm = 60\n[modulator]\nfeedforward = "yes"'), "modulator.feedforward", "yes", "true or false"),
    (("pm = 60", "pm = 60\n[modulator]\nmax_duty = 1.2"), "modulator.max_duty", "1.2", "between 0 and 1"),
    (("version = 1", "version = 2"), "version", "2", "this loopkit reads version 1"),
    (('format = "loopkit-design"', 'format = "other"'), "format", "other", "must be 'loopkit-design'"),
    (('title = "test buck"', "title = 3"), "title", "3", "must be text"),
    (('title = "test buck"', 'title = "t"\nmodulator = 3'), "modulator", "3", "must be a table ([modulator])"),
    (
        ('title = "test buck"', 'title = "t"\nextra = 3'),
        "extra",
        "3",
        "unknown key; allowed here: compensator, format,",
    ),
]


@pytest.mark.parametrize("change, field, value, allowed", ERRORS, ids=[e[1] + ":" + e[2] for e in ERRORS])
def test_error_names_file_key_value_and_what_is_allowed(change, field, value, allowed):
    err = error_of(edit(BUCK, *change))
    assert isinstance(err, DesignError) and isinstance(err, ValueError)
    assert err.file == "buck.toml"
    assert err.field == field
    assert str(err).startswith(f"buck.toml: {field} = {value}: ")
    assert allowed in str(err)


def test_missing_tables():
    err = error_of(BUCK[: BUCK.index("[stage]")] + BUCK[BUCK.index("[operating]") :])
    assert str(err) == "buck.toml: stage = (missing): the [stage] table is required"
    err = error_of(BUCK[: BUCK.index("[operating]")] + BUCK[BUCK.index("[sensing]") :])
    assert str(err) == "buck.toml: operating = (missing): the [operating] table is required"


def test_not_toml():
    err = error_of(BUCK + "\n[stage\n")
    assert str(err).startswith("buck.toml: (TOML): not valid TOML: ")
    assert "line" in str(err)


def test_wrong_output_sign_for_the_topology():
    # [EM] Table 8.2: the inverting buck-boost has M = -D/(1 - D) < 0
    err = error_of(edit(INVERTING, 'vout = "-15"', 'vout = "15"'), "inv.toml")
    assert str(err) == ("inv.toml: operating.vout = 15: an inverting buck-boost makes a negative output: give vout < 0")
    err = error_of(edit(INVERTING, 'kind = "differential"', 'kind = "divider"'), "inv.toml")
    assert err.field == "sensing.kind" and "a negative output needs differential sensing" in str(err)


def test_value_given_as_a_toml_number_is_shown_with_its_unit():
    err = error_of(edit(BUCK, 'inductance = "4.7u"', "inductance = -22e-6"))
    assert str(err) == "buck.toml: stage.inductance = -22µH: must be > 0 (from 1nH to 1H)"


@pytest.mark.parametrize(
    "topology_change, vin, vout, field, words",
    [
        # [EM] ch. 2: buck M = D <= 1, boost M = 1/(1-D) >= 1
        (
            (('vout = "3.3"', 'vout = "12"'), ('vin_min = "18"', 'vin_min = "9"')),
            None,
            None,
            "operating.vin[0]",
            "a buck cannot make 12V from 9V",
        ),
        (
            (
                ('topology = "buck"', 'topology = "boost"'),
                ('vout = "3.3"', 'vout = "5"'),
                ('vin_min = "18"\nvin_max = "32"\nvin_points = 3', 'vin = ["3", "4.2", "6"]'),
            ),
            None,
            None,
            "operating.vin[2]",
            "a boost cannot make 5V from 6V",
        ),
    ],
)
def test_stage_that_cannot_make_its_output(topology_change, vin, vout, field, words):
    text = BUCK
    for old, new in topology_change:
        text = edit(text, old, new)
    design = loads_design(text)  # the file itself is well formed
    with pytest.raises(DesignError) as err:
        analyse_stage(design)
    assert err.value.field == field
    assert str(err.value).startswith(f"{field} = ")
    assert words in str(err.value)


def test_unreadable_files(tmp_path):
    missing = tmp_path / "nope.toml"
    with pytest.raises(DesignFileError, match=r"nope\.toml: \(file\): cannot be read"):
        load_design(missing)
    binary = tmp_path / "bin.toml"
    binary.write_bytes(b'title = "\xff\xfe"\n')
    with pytest.raises(DesignFileError, match=r"bin\.toml: \(file\): is not UTF-8 text"):
        load_design(binary)
    with pytest.raises(DesignFileError, match="cannot be read"):
        load_design(tmp_path)


# ------------------------------------------------------------ operating ranges
def _vin(text: str) -> tuple:
    return loads_design(text).operating.vin


def test_vin_range_is_linear_with_both_ends():
    assert _vin(BUCK) == (18.0, 25.0, 32.0)
    assert _vin(edit(BUCK, "vin_points = 3", "vin_points = 5")) == (18.0, 21.5, 25.0, 28.5, 32.0)
    assert _vin(edit(BUCK, "vin_points = 3\n", "")) == (18.0, 25.0, 32.0)  # default 3 points
    assert _vin(edit(BUCK, "vin_points = 3", "vin_points = 2")) == (18.0, 32.0)


def test_vin_range_includes_the_nominal_input():
    d = loads_design(edit(BUCK, "vin_points = 3", 'vin_points = 3\nvin_nominal = "24"'))
    assert d.operating.vin == (18.0, 24.0, 25.0, 32.0)
    assert d.operating.vin_nominal == 24.0
    # a nominal that is already a grid point is not repeated
    assert _vin(edit(BUCK, "vin_points = 3", 'vin_points = 3\nvin_nominal = "25"')) == (18.0, 25.0, 32.0)
    assert _vin(edit(BUCK, "vin_points = 3", 'vin_points = 3\nvin_nominal = "18"')) == (18.0, 25.0, 32.0)
    # and round-trips as the explicit list it became
    assert loads_design(dumps_design(d)) == d


def test_explicit_vin_list_is_kept_as_given():
    text = edit(BUCK, 'vin_min = "18"\nvin_max = "32"\nvin_points = 3', 'vin = ["24", "12", "36"]\nvin_nominal = "20"')
    d = loads_design(text)
    assert d.operating.vin == (24.0, 12.0, 36.0)
    assert d.operating.vin_nominal == 20.0


def test_single_point_range():
    assert _vin(edit(BUCK, 'vin_max = "32"\nvin_points = 3', 'vin_max = "18"')) == (18.0,)
    err = error_of(edit(BUCK, 'vin_max = "32"\nvin_points = 3', 'vin_max = "18"\nvin_points = 3'))
    assert err.field == "operating.vin_points" and "must be 1 when vin_min = vin_max" in str(err)


def test_load_range_is_geometric_with_both_ends():
    base = 'load = ["0.3", "1.5", "3"]'
    two = loads_design(edit(BUCK, base, 'load_min = "0.3"\nload_max = "3"')).operating.load
    assert two == (0.3, 3.0)
    three = loads_design(edit(BUCK, base, 'load_min = "0.3"\nload_max = "3"\nload_points = 3')).operating.load
    assert three[0] == 0.3 and three[2] == 3.0
    assert three[1] == pytest.approx((0.3 * 3.0) ** 0.5, rel=1e-15)


def test_corner_order_is_vin_outermost():
    op = loads_design(BUCK).operating
    vin, load = op.corners()
    assert vin.tolist() == [18.0] * 3 + [25.0] * 3 + [32.0] * 3
    assert load.tolist() == [0.3, 1.5, 3.0] * 3
