"""Physical quantities: strict parsing, copy numbers and time scales (crn.core.units)."""

import math

import pytest

from crn.cli import main
from crn.core.errors import CRNError
from crn.core.units import (
    AVOGADRO,
    concentration_for,
    copies,
    format_concentration,
    format_time,
    format_volume,
    parse_concentration,
    parse_rate_constant,
    parse_time,
    parse_volume,
    seconds_per_parallel_time,
    to_parallel_time,
    to_seconds,
    volume_for,
)


def test_one_nanomolar_in_one_microlitre():
    # N_A = 6.02214076e23 /mol exact since the 2019 SI (IUPAC Gold Book);
    # 1 nM in 1 uL = 6.02214076e8 molecules
    assert AVOGADRO == 6.02214076e23
    n = copies(parse_concentration("1nM"), parse_volume("1uL"))
    assert n == pytest.approx(6.02214076e8, rel=1e-15)


@pytest.mark.parametrize("text, molar", [
    ("10nM", 1e-8), ("10 nM", 1e-8), ("2.5 uM", 2.5e-6), ("2.5\u00b5M", 2.5e-6),
    ("2.5 \u03bcM", 2.5e-6), ("1e-3 M", 1e-3), ("3 mM", 3e-3), ("7pM", 7e-12), ("4 fM", 4e-15),
])
def test_concentrations_as_written(text, molar):
    # derived: SI prefixes (m 1e-3, u 1e-6, n 1e-9, p 1e-12, f 1e-15)
    assert parse_concentration(text) == pytest.approx(molar, rel=1e-15)


@pytest.mark.parametrize("text, liters", [
    ("5uL", 5e-6), ("5 \u00b5L", 5e-6), ("1 pL", 1e-12), ("2mL", 2e-3), ("3 nL", 3e-9),
    ("10 fL", 1e-14), ("1 L", 1.0),
])
def test_volumes_as_written(text, liters):
    # derived: SI prefixes
    assert parse_volume(text) == pytest.approx(liters, rel=1e-15)


@pytest.mark.parametrize("text", ["1e6/M/s", "1e6 /M/s", "1e6 M^-1 s^-1", "1e6 M-1 s-1",
                                  "1e6 /(M s)", "1 /uM/s", "1e-3 /nM/s", "6e7 /M/min"])
def test_rate_constant_forms_agree(text):
    # derived: 1 /uM/s = 1e6 /M/s; 1e-3 /nM/s = 1e6 /M/s; 6e7 /M/min = 1e6 /M/s
    assert parse_rate_constant(text) == pytest.approx(1e6, rel=1e-12)


def test_times():
    # derived: 1 h = 3600 s, 1 min = 60 s
    assert parse_time("2h") == 7200.0
    assert parse_time("90 min") == 5400.0
    assert parse_time("30s") == 30.0


@pytest.mark.parametrize("parse, text", [
    (parse_concentration, "10 nm"),     # nanometre, not nanomolar
    (parse_concentration, "10"),        # no unit
    (parse_concentration, "10 mol"),
    (parse_concentration, "-1 nM"),
    (parse_volume, "5 uM"),
    (parse_volume, "5 cc"),
    (parse_time, "2 days"),
    (parse_rate_constant, "1e6 /M"),
    (parse_rate_constant, "1e6 /s"),
    (parse_rate_constant, "1e6"),       # no unit: a bare number is not read as /M/s
])
def test_bad_units_rejected_with_the_accepted_list(parse, text):
    with pytest.raises(CRNError) as info:
        parse(text)
    message = str(info.value)
    assert "\n" not in message
    if "positive" not in message:
        assert "accepted units" in message


def test_accepted_units_are_listed():
    with pytest.raises(CRNError, match=r"accepted units: M, mM, uM \(or \u00b5M\), nM, pM, fM"):
        parse_concentration("10 nm")
    with pytest.raises(CRNError, match=r"accepted units: L, mL, uL .*pL, fL"):
        parse_volume("1 m3")


@pytest.mark.parametrize("conc, vol", [(1e-9, 1e-6), (3.3e-8, 2e-12), (1e-6, 7e-15)])
def test_conversions_round_trip(conc, vol):
    # derived: n = C V N_A, so C = n / (V N_A) and V = n / (C N_A)
    n = copies(conc, vol)
    assert concentration_for(n, vol) == pytest.approx(conc, rel=1e-14)
    assert volume_for(n, conc) == pytest.approx(vol, rel=1e-14)
    assert parse_concentration(format_concentration(conc, digits=17)) == pytest.approx(conc,
                                                                                       rel=1e-14)
    assert parse_volume(format_volume(vol, digits=17)) == pytest.approx(vol, rel=1e-14)


def test_parallel_time_unit():
    # docs/design.md physical units: one unit of parallel time = 1 / (k_phys C) seconds;
    # derived: k = 1e6 /M/s, C = 10 nM -> 100 s
    assert seconds_per_parallel_time(1e6, 1e-8) == pytest.approx(100.0, rel=1e-15)
    assert to_seconds(36.0, 1e6, 1e-8) == pytest.approx(3600.0)
    assert to_parallel_time(to_seconds(2.5, 1e6, 3e-9), 1e6, 3e-9) == pytest.approx(2.5)
    assert format_time(5400) == "1.5 h"
    assert format_volume(2e-12) == "2 pL"
    assert math.isclose(parse_time(format_time(5400)), 5400)


def test_cli_rejects_bad_unit_with_exit_2(capsys):
    code = main(["copies", "models/approximate_majority.toml", "--gap-fraction", "0.2",
                 "--concentration", "10 nm"])
    assert code == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0
    assert "accepted units: M, mM" in err
    code = main(["copies", "models/approximate_majority.toml", "--gap-fraction", "0.2",
                 "--volume", "1pL", "--rate", "1e6 /M"])
    assert code == 2
    assert "/M/s" in capsys.readouterr().err
