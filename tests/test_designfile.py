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

from loopkit import analyse_stage, atomicfile
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
    fc = base.compensator.fc_hz if base.compensator.fc_hz < fsw / 2 else 0.0
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
        compensator=dataclasses.replace(base.compensator, pm_deg=pm, parts=parts, fc_hz=fc),
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
    for key in ("topology", "fsw", "inductance", "dcr", "r_switch", "rectifier", "r_rectifier"):
        assert key in doc["stage"]
    # an automatic light_load (not given) is not written: "" is no documented value
    assert "light_load" not in doc["stage"]
    assert doc["stage"]["rectifier"] == "synchronous"
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
    # BUCK gives vin as a range: written back as that range, not as the list of its points
    assert (doc["operating"]["vin_min"], doc["operating"]["vin_max"], doc["operating"]["vin_points"]) == ("18", "32", 3)
    assert "vin" not in doc["operating"]
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
        monkeypatch.setattr(atomicfile.os, "fdopen", lambda *a, **k: HalfWriter(real_fdopen(*a, **k)))
    elif where == "fsync":
        monkeypatch.setattr(atomicfile.os, "fsync", fail)
    elif where == "replace":
        monkeypatch.setattr(atomicfile.os, "replace", fail)
    else:
        monkeypatch.setattr(atomicfile.os, "fsync", interrupt)
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


def test_failure_names_the_target_not_its_temporary(tmp_path, monkeypatch):
    path = tmp_path / "d.toml"
    path.write_text("old content\n")

    def fail(*args, **kwargs):
        raise OSError(5, "Input/output error")

    monkeypatch.setattr(atomicfile.os, "replace", fail)
    with pytest.raises(OSError) as err:
        save_design(loads_design(BUCK), path)
    monkeypatch.undo()
    assert err.value.filename == str(path)
    assert ".tmp" not in str(err.value)
    missing = tmp_path / "no such folder" / "d.toml"
    with pytest.raises(FileNotFoundError) as err:
        save_design(loads_design(BUCK), missing)
    assert err.value.filename == str(missing)


@pytest.mark.skipif(os.name != "posix", reason="POSIX permissions")
def test_save_refuses_a_read_only_file(tmp_path):
    path = tmp_path / "d.toml"
    path.write_text(BUCK)
    os.chmod(path, 0o444)  # the folder stays writable: a rename could replace it, and must not
    d = dataclasses.replace(loads_design(BUCK), title="changed")
    with pytest.raises(PermissionError) as err:
        save_design(d, path)
    assert err.value.filename == str(path) and "read-only" in err.value.strerror
    assert path.read_text() == BUCK
    assert _listing(tmp_path) == ["d.toml"]


_KILLED_SAVE = """\
import os, sys, time
from loopkit import designfile
from loopkit.designfile import loads_design, save_design

def stall(fd):  # the text is written, not yet renamed: tell the test, then wait to be killed
    print("in the middle", flush=True)
    time.sleep(60)

os.fsync = stall
save_design(loads_design(open(sys.argv[1]).read()), sys.argv[2])
"""


@pytest.mark.skipif(os.name != "posix", reason="SIGKILL")
def test_save_killed_midway_keeps_the_file_and_the_next_save_cleans_up(tmp_path):
    import signal
    import subprocess
    import sys

    source = tmp_path / "source.toml"
    source.write_text(BUCK)
    work = tmp_path / "work"
    work.mkdir()
    path = work / "d.toml"
    path.write_text("old content\n")
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[1])}
    proc = subprocess.Popen(
        [sys.executable, "-c", _KILLED_SAVE, str(source), str(path)], stdout=subprocess.PIPE, text=True, env=env
    )
    try:
        assert proc.stdout.readline().strip() == "in the middle"
        os.kill(proc.pid, signal.SIGKILL)
        assert proc.wait(timeout=30) == -signal.SIGKILL
    finally:
        proc.kill()
        proc.stdout.close()
    left = [n for n in _listing(work) if n != "d.toml"]
    assert len(left) == 1 and left[0].startswith(f".d.toml.{proc.pid}.") and left[0].endswith(".tmp")
    assert path.read_text() == "old content\n"  # killed before the rename: the old file, whole
    # a temporary of a save still running (this process) is not touched; the dead one is removed
    running = work / f".d.toml.{os.getpid()}.0123456789ab.tmp"
    running.write_text("another save in progress")
    save_design(loads_design(BUCK), path)
    assert _listing(work) == sorted(["d.toml", running.name])
    assert load_design(path) == loads_design(BUCK)


def test_write_files_atomic_leaves_nothing_half_written(tmp_path, monkeypatch):

    first, second = tmp_path / "a.csv", tmp_path / "b.json"
    first.write_text("old a\n")
    calls = []
    real = os.fsync

    def full_disk_on_second(fd):
        calls.append(fd)
        if len(calls) == 2:
            raise OSError(28, "No space left on device")
        return real(fd)

    monkeypatch.setattr(atomicfile.os, "fsync", full_disk_on_second)
    with pytest.raises(OSError) as err:
        atomicfile.write_files_atomic([(first, "new a\n"), (second, "new b\n")])
    monkeypatch.undo()
    assert err.value.filename == str(second)
    assert first.read_text() == "old a\n"  # the first was complete but not moved: all or nothing
    assert _listing(tmp_path) == ["a.csv"]
    atomicfile.write_files_atomic([(first, "new a\n"), (second, "new b\n")])
    assert (first.read_text(), second.read_text()) == ("new a\n", "new b\n")
    assert _listing(tmp_path) == ["a.csv", "b.json"]


# ------------------------------------------------------------ keeping the user's file (round-trip edits)
COMMENTED = """\
# My buck: a bench prototype, rev B.   (comments, key order and notation must survive)
format = "loopkit-design"
version = 1
title = "test buck"

[stage]
topology = "buck"     # synchronous
fsw = "400kHz"        # fixed by EMI
inductance = "4.7uH"
dcr = "14m"
r_switch = "25m"
rectifier = "synchronous"
r_rectifier = "10m"

[[stage.output_caps]]   # X7R ceramics
capacitance = "22u"
esr = "3m"
count = 4

[operating]
vout = "3.3"
vin_min = "18"   # lowest bus
vin_max = "32"
vin_points = 3
load_min = "0.5"
load_max = "20"
load_points = 3

[sensing]
reference = "0.8"
r_top = "49k9"

[compensator]
network = "type3"
fc = "40kHz"   # crossover target
pm = 60        # deg
"""


def _diff(a: str, b: str) -> tuple[list[str], list[str]]:
    """Lines removed from ``a`` and added in ``b``."""
    import difflib

    lines = list(difflib.ndiff(a.splitlines(), b.splitlines()))
    return [x[2:] for x in lines if x.startswith("- ")], [x[2:] for x in lines if x.startswith("+ ")]


def test_edit_changes_only_the_parts_and_keeps_everything_else():
    from loopkit.designedit import edit_design_text

    before = loads_design(COMMENTED)
    parts = {"R1": 49.9e3, "R2": 6.81e3, "R3": 1.05e3, "C1": 3.9e-9, "C2": 82e-12, "C3": 560e-12}
    after = dataclasses.replace(before, compensator=dataclasses.replace(before.compensator, parts=parts))
    text = edit_design_text(COMMENTED, before, after)
    removed, added = _diff(COMMENTED, text)
    assert removed == []
    assert [a for a in added if a.strip()] == [
        "[compensator.parts]",
        'R1 = "49.9k"',
        'R2 = "6.81k"',
        'R3 = "1.05k"',
        'C1 = "3.9n"',
        'C2 = "82p"',
        'C3 = "560p"',
    ]
    assert text.startswith(COMMENTED)  # every line of the user's file, in its order, then the parts
    assert loads_design(text) == after
    assert "3.1622776601683795" not in text and "light_load" not in text


def test_edit_of_targets_keeps_comments_notation_and_form():
    from loopkit.designedit import edit_design_text

    before = loads_design(COMMENTED)
    comp = dataclasses.replace(before.compensator, fc_hz=25e3, pm_deg=55.0, parts={"R1": 49.9e3, "R2": 10e3})
    after = dataclasses.replace(before, compensator=comp)
    text = edit_design_text(COMMENTED, before, after)
    removed, added = _diff(COMMENTED, text)
    assert removed == ['fc = "40kHz"   # crossover target', "pm = 60        # deg"]
    assert added[:2] == ['fc = "25kHz"   # crossover target', "pm = 55        # deg"]  # unit, comment, int kept
    assert loads_design(text) == after


def test_edit_of_a_range_writes_a_range_or_a_list_never_both():
    from loopkit.designedit import edit_design_text

    before = loads_design(COMMENTED)
    wider = dataclasses.replace(before, operating=dataclasses.replace(before.operating, vin=(12.0, 22.0, 32.0)))
    text = edit_design_text(COMMENTED, before, wider)
    assert 'vin_min = "12"   # lowest bus' in text and "vin =" not in text
    assert loads_design(text) == wider
    odd = dataclasses.replace(before, operating=dataclasses.replace(before.operating, vin=(12.0, 13.0, 32.0)))
    text = edit_design_text(COMMENTED, before, odd)
    doc = tomllib.loads(text)["operating"]
    assert doc["vin"] == ["12", "13", "32"] and not {"vin_min", "vin_max", "vin_points"} & set(doc)
    assert loads_design(text) == odd


def test_edit_of_banks_and_removed_parts():
    from loopkit.designedit import edit_design_text

    before = loads_design(COMMENTED)
    bank = CapacitorBank(100e-6, 20e-3, 2)
    more = dataclasses.replace(
        before, stage=dataclasses.replace(before.stage, output_caps=(*before.stage.output_caps, bank))
    )
    text = edit_design_text(COMMENTED, before, more)
    assert loads_design(text) == more
    esr = dataclasses.replace(
        before,
        stage=dataclasses.replace(
            before.stage, output_caps=(dataclasses.replace(before.stage.output_caps[0], esr=5e-3),)
        ),
    )
    text = edit_design_text(COMMENTED, before, esr)
    assert _diff(COMMENTED, text) == (['esr = "3m"'], ['esr = "5m"'])
    with_parts = dataclasses.replace(before, compensator=dataclasses.replace(before.compensator, parts={"R1": 1e4}))
    text = edit_design_text(COMMENTED, before, with_parts)
    assert edit_design_text(text, with_parts, before).strip() == COMMENTED.strip()  # parts removed again


def test_every_sample_survives_an_edit_of_its_parts(sample_path):
    from loopkit.designedit import edit_design_text

    text = sample_path.read_text(encoding="utf-8")
    before = load_design(sample_path)
    parts = {"R1": 12.1e3, "C1": 4.7e-9}
    after = dataclasses.replace(before, compensator=dataclasses.replace(before.compensator, parts=parts))
    edited = edit_design_text(text, before, after)
    assert loads_design(edited) == after
    removed, _ = _diff(text, edited)
    assert all(
        line.startswith(
            ("R1 =", "C1 =", "Rz =", "Cz =", "R2 =", "C2 =", "R3 =", "C3 =", "Rb =", "Rc =", "Cc =", "Chf =", "Cpole =")
        )
        for line in removed
    )
    assert edited.count("#") >= text.count("#")  # no comment lost


def test_update_refuses_a_file_changed_since_it_was_read(tmp_path):
    from loopkit.designedit import update_design_file

    path = tmp_path / "d.toml"
    path.write_text(COMMENTED)
    before = loads_design(COMMENTED)
    after = dataclasses.replace(before, title="new")
    path.write_text(edit(COMMENTED, 'dcr = "14m"', 'dcr = "20m"'))  # someone saved in between
    with pytest.raises(DesignFileError, match="changed since loopkit read it"):
        update_design_file(path, before, after)
    assert 'dcr = "20m"' in path.read_text()


def test_a_range_reads_back_as_the_range():
    d = loads_design(COMMENTED)
    doc = _written(d)["operating"]
    assert (doc["load_min"], doc["load_max"], doc["load_points"]) == ("0.5", "20", 3)  # not 3.1622776601683795
    assert (doc["vin_min"], doc["vin_max"], doc["vin_points"]) == ("18", "32", 3)
    assert loads_design(dumps_design(d)) == d


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
        "unknown key; allowed here: c_opto, ctr, r_led, r_pull, v_led, v_pin, v_pullup, v_shunt_min",
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
        "unknown key; allowed here: compensator, control, digital, format,",
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


def test_save_keeping_the_layout_of_the_file_there(tmp_path):
    path = tmp_path / "d.toml"
    path.write_text(COMMENTED)
    before = loads_design(COMMENTED)
    after = dataclasses.replace(before, stage=dataclasses.replace(before.stage, dcr=20e-3))
    save_design(after, path, keep_layout=True)
    assert _diff(COMMENTED, path.read_text()) == (['dcr = "14m"'], ['dcr = "20m"'])
    assert load_design(path) == after
    save_design(before, path)  # the default: the whole file from the design
    assert "# My buck" not in path.read_text() and load_design(path) == before
    path.write_text("not a design\n")
    save_design(after, path, keep_layout=True)  # nothing to keep: written whole
    assert load_design(path) == after


SAMPLE_TEXTS = [(p.read_text(encoding="utf-8"), load_design(p)) for p in SAMPLES]


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    sample=st.sampled_from(SAMPLE_TEXTS),
    inductance=st.floats(min_value=1e-7, max_value=1e-2),
    dcr=st.floats(min_value=0.0, max_value=1.0),
    esr=st.floats(min_value=0.0, max_value=1.0),
    vin_scale=st.floats(min_value=1.0, max_value=1.5),
    pm=st.floats(min_value=20.0, max_value=80.0),
    ramp=st.floats(min_value=0.1, max_value=5.0),
    parts=st.one_of(
        st.dictionaries(st.sampled_from(["R1", "R2", "R3", "Rb"]), st.floats(min_value=1.0, max_value=1e7), max_size=4),
        st.dictionaries(st.sampled_from(["C1", "C2", "C3"]), st.floats(min_value=1e-12, max_value=1e-3), max_size=3),
    ),
    title=st.text(max_size=30),
    changed=st.sets(st.sampled_from(["L", "dcr", "esr", "vin", "pm", "ramp", "parts", "title"]), min_size=1),
)
def test_edits_read_back_and_keep_every_comment(
    sample, inductance, dcr, esr, vin_scale, pm, ramp, parts, title, changed
):
    from loopkit.designedit import edit_design_text

    text, base = sample
    stage, op, comp = base.stage, base.operating, base.compensator
    if "L" in changed:
        stage = dataclasses.replace(stage, inductance=inductance)
    if "dcr" in changed:
        stage = dataclasses.replace(stage, dcr=dcr)
    if "esr" in changed:
        stage = dataclasses.replace(
            stage, output_caps=(dataclasses.replace(stage.output_caps[0], esr=esr), *stage.output_caps[1:])
        )
    if "vin" in changed:  # the top input voltage raised: a range stays a range where one fits
        vin = op.vin[:-1] + (op.vin[-1] * vin_scale,)
        op = dataclasses.replace(op, vin=vin, vin_nominal=None)
    if "pm" in changed:
        comp = dataclasses.replace(comp, pm_deg=pm)
    if "parts" in changed:
        comp = dataclasses.replace(comp, parts=parts)
    after = dataclasses.replace(
        base,
        stage=stage,
        operating=op,
        compensator=comp,
        title=title if "title" in changed else base.title,
        modulator=dataclasses.replace(base.modulator, ramp=ramp) if "ramp" in changed else base.modulator,
    )
    edited = edit_design_text(text, base, after)
    assert loads_design(edited) == after
    for line in text.splitlines():
        if "#" in line and not line.lstrip().startswith("title"):
            assert line[line.index("#") :] in edited  # every comment, whole-line or trailing, is kept
