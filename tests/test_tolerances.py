"""Tolerances in the design file: parsing, validation, defaults and the draws' distributions."""

import numpy as np
import pytest
from scipy import stats

from loopkit.designfile import dumps_design, load_design, loads_design
from loopkit.errors import DesignError
from loopkit.tolerances import Quantity, draw_values, quantities

BUCK = "sample_designs/buck_24v_3v3.toml"


def _with(section: str) -> str:
    from pathlib import Path

    return Path(BUCK).read_text() + "\n" + section


def test_round_trip_and_resolution():
    text = _with('''[tolerances]
distribution = "normal"
inductance = "20%"
dcr = { min = "8m", max = "14m", distribution = "uniform" }
r_switch = { percent = 30, sigmas = 2 }

[[tolerances.output_caps]]
capacitance = "10%"
derating = 0.6

[tolerances.parts]
C1 = "5%"
''')
    d = loads_design(text)
    assert loads_design(dumps_design(d)) == d
    qs = {q.key: q for q in quantities(d, parts={"R1": 1e4, "R2": 2e4, "C1": 1e-9, "C2": 1e-11})}
    assert qs["inductance"].low == pytest.approx(0.8 * 4.7e-6) and qs["inductance"].distribution == "normal"
    assert (qs["dcr"].low, qs["dcr"].high, qs["dcr"].distribution) == (8e-3, 14e-3, "uniform")
    assert qs["r_switch"].sigmas == 2.0
    c = d.stage.output_caps[0].capacitance  # per capacitor; the bank moves as one (same lot)
    assert qs["output_caps[0].capacitance"].nominal == pytest.approx(0.6 * c)
    assert qs["output_caps[0].capacitance"].high == pytest.approx(0.6 * 1.1 * c)
    # IEC 60063 usual tolerances: E96 1 % (resistors here), E12 10 % (capacitors), override C1 5 %
    assert qs["parts.R2"].high == pytest.approx(2e4 * 1.01)
    assert qs["parts.C2"].low == pytest.approx(1e-11 * 0.9)
    assert qs["parts.C1"].low == pytest.approx(1e-9 * 0.95)


def test_no_table_means_no_tolerances():
    d = load_design(BUCK)
    assert d.tolerances.empty
    assert "[tolerances]" not in dumps_design(d)
    assert [q.key for q in quantities(d, parts={"R2": 1e3})] == ["parts.R2"]  # the series default alone


@pytest.mark.parametrize(
    "section, field, words",
    [
        ('inductance = "-5%"', "tolerances.inductance", "0 %"),
        ('inductance = "120%"', "tolerances.inductance", "below 100 %"),
        ('inductance = "20"', "tolerances.inductance", "P%"),
        ('inductance = { percent = 10, distribution = "triangle" }', "tolerances.inductance.distribution", "uniform"),
        ('distribution = "lognormal"', "tolerances.distribution", "normal"),
        ('sigmas = 0.5', "tolerances.sigmas", "from 1 to 6"),
        ('dcr = { min = "14m", max = "8m" }', "tolerances.dcr.max", ">= min"),
        ('dcr = { min = "8m" }', "tolerances.dcr", "both min and max"),
        ('ind = "5%"', "tolerances.ind", "unknown key"),
        ('[[tolerances.output_caps]]\nderating = 1.5', "tolerances.output_caps[0].derating", "at most 1"),
        ('[[tolerances.output_caps]]\nderating = 0', "tolerances.output_caps[0].derating", "above 0"),
    ],
)
def test_bad_input_names_field_value_and_range(section, field, words):
    text = _with("[tolerances]\n" + section + "\n")
    with pytest.raises(DesignError) as err:
        loads_design(text)
    assert err.value.field == field
    assert words in err.value.allowed


def test_entry_the_design_lacks():
    d = loads_design(_with('[tolerances]\nsense_gain = "5%"\n'))  # a voltage-mode design
    with pytest.raises(DesignError, match="peak current mode"):
        quantities(d)


def test_uniform_and_normal_draws_follow_their_laws():
    """Kolmogorov-Smirnov against scipy's own distributions (Massey, JASA 46, 1951)."""
    qs = [Quantity("a", 1.0, 0.8, 1.2, "uniform", 3.0, ""), Quantity("b", 1.0, 0.7, 1.3, "normal", 2.0, "")]
    x = draw_values(qs, 20000, np.random.default_rng(7))
    assert stats.kstest(x[:, 0], stats.uniform(0.8, 0.4).cdf).pvalue > 1e-3
    sigma = 0.3 / 2.0
    assert stats.kstest(x[:, 1], stats.truncnorm(-2, 2, loc=1.0, scale=sigma).cdf).pvalue > 1e-3
    assert stats.kstest(x[:, 1], stats.norm(1.0, sigma).cdf).pvalue < 1e-3  # the truncation shows
    assert x[:, 1].min() >= 0.7 and x[:, 1].max() <= 1.3
    again = draw_values(qs, 20000, np.random.default_rng(7))
    np.testing.assert_array_equal(x, again)  # the same random state gives the same draws


def test_temperature_corners_round_trip_and_errors():
    text = _with('''[tolerances]
inductance = "10%"

[[tolerances.temperature]]
name = "-40 C"
capacitance = 0.85
esr = 3.0

[[tolerances.temperature]]
name = "105 C"
inductance = 0.9
''')
    d = loads_design(text)
    assert [c.name for c in d.tolerances.temperatures] == ["-40 C", "105 C"]
    assert loads_design(dumps_design(d)) == d
    from loopkit.tolerances import temperature_factors

    qs = quantities(d, parts={})
    f = temperature_factors(qs, d.tolerances)
    assert f.shape == (2, len(qs)) and f[1, 0] == 0.9 and f[0, 0] == 1.0
    for bad, field in (('name = "x"\ncapacitance = 0', "tolerances.temperature[0].capacitance"),
                       ('capacitance = 0.9', "tolerances.temperature[0].name"),
                       ('name = "x"\ninductor = 0.9', "tolerances.temperature[0].inductor")):
        with pytest.raises(DesignError) as err:
            loads_design(_with("[[tolerances.temperature]]\n" + bad + "\n"))
        assert err.value.field == field


def test_design_write_keeps_the_tolerances(tmp_path, capsys):
    """``loopkit design --write`` changes only the parts: the [tolerances] table reads back the same."""
    from loopkit.cli import main

    path = tmp_path / "d.toml"
    path.write_text(_with('[tolerances]\ninductance = "20%"\n\n[[tolerances.temperature]]\nname = "cold"\n'
                          'capacitance = 0.8\n'))
    before = load_design(path).tolerances
    assert main(["design", str(path), "--write"]) == 0
    after = load_design(path)
    assert after.tolerances == before and after.compensator.parts
