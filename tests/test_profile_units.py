"""ASD units in profile files: every accepted spelling, TOML and CSV alike, and refusals that do not guess.

References used below:
- Standard acceleration of gravity g0 = 9.80665 m/s^2 exactly: 3rd CGPM (1901), ISO 80000-3:2019
  item 3-9.2; so 1 g^2/Hz = g0^2 (m/s^2)^2/Hz.
- Mean-square as the area under the one-sided ASD (Bendat & Piersol, Random Data, 4th ed., 2010):
  a flat 1 (unit)^2/Hz from 20 to 2000 Hz has a mean-square of 1980 (unit)^2.
"""

from __future__ import annotations

import math
import subprocess
import sys

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from vibsynth.errors import InputError
from vibsynth.profile.files import format_csv_profile, parse_csv_profile, parse_toml_profile, read_profile
from vibsynth.profile.units import (
    ACCEPTED_SPELLINGS,
    G2_PER_HZ,
    SI_ASD,
    STANDARD_GRAVITY_M_S2,
    asd_unit,
    asd_units_named_in,
)

#: g0 in m/s^2, exact by definition (3rd CGPM 1901; ISO 80000-3:2019, item 3-9.2).
G0 = 9.80665
#: Flat 1 (unit)^2/Hz from 20 to 2000 Hz: mean-square 1980 (unit)^2 (area under the ASD, Bendat & Piersol 2010).
AREA = 2000.0 - 20.0
#: ...in g RMS when the unit is g^2/Hz: sqrt(1980) = 44.497 g.
GRMS_IF_G = math.sqrt(AREA)
#: ...in g RMS when the unit is (m/s^2)^2/Hz: sqrt(1980) / g0 = 4.5375 g.
GRMS_IF_SI = math.sqrt(AREA) / G0

G_SPELLINGS = ["g^2/Hz", "g2/Hz", "g²/Hz", "g**2/Hz", "g^2 / Hz", "G^2/HZ", "g2 per Hz"]
SI_SPELLINGS = [
    "(m/s^2)^2/Hz",
    "m^2/s^4/Hz",
    "(m/s²)²/Hz",
    "m2/s4/Hz",
    "(m/s2)2/Hz",
    "m²/s⁴/Hz",
    "(m/s**2)**2/Hz",
    "m**2/s**4/Hz",
    "( m/s^2 )^2 / Hz",
    "m^2 / s^4 / Hz",
]
SPELLINGS = [(s, GRMS_IF_G) for s in G_SPELLINGS] + [(s, GRMS_IF_SI) for s in SI_SPELLINGS]


def _toml(unit: str) -> str:
    return f'unit = "{unit}"\n[[breakpoints]]\nfrequency = 20\nasd = 1.0\n[[breakpoints]]\nfrequency = 2000\nasd = 1.0\n'


def _csv(header: str) -> str:
    return f"{header}\n20,1\n2000,1\n"


def test_the_constant_is_standard_gravity():
    # 9.80665 m/s^2 exactly (3rd CGPM 1901; ISO 80000-3:2019).
    assert STANDARD_GRAVITY_M_S2 == G0
    assert SI_ASD.to_g2_per_hz == pytest.approx(1.0 / G0**2, rel=1e-15)
    assert G2_PER_HZ.to_g2_per_hz == 1.0


def test_reported_case_reads_4_5375_g_not_44_50():
    # Issue 10 item 1: this header was read as g^2/Hz (44.50 g). sqrt(1980) / 9.80665 = 4.5375 g
    # (area under the ASD, Bendat & Piersol 2010; g0 from ISO 80000-3).
    profile = parse_csv_profile(_csv("frequency (Hz), ASD (m^2/s^4/Hz)"), "si.csv")
    assert profile.grms == pytest.approx(GRMS_IF_SI, rel=1e-12)
    assert profile.grms == pytest.approx(4.5375, abs=5e-5)


@pytest.mark.parametrize("spelling, grms", SPELLINGS, ids=[s for s, _ in SPELLINGS])
def test_every_spelling_in_toml(spelling, grms):
    assert parse_toml_profile(_toml(spelling), "p.toml").grms == pytest.approx(grms, rel=1e-12)


@pytest.mark.parametrize("spelling, grms", SPELLINGS, ids=[s for s, _ in SPELLINGS])
@pytest.mark.parametrize(
    "template",
    ["frequency (Hz), ASD ({})", "frequency_hz;asd [{}]", "frequency\tASD in {}", "f,{}", "frequency_hz ASD ({})"],
)
def test_every_spelling_in_a_csv_header(spelling, grms, template):
    header = template.format(spelling)
    assert parse_csv_profile(_csv(header), "p.csv").grms == pytest.approx(grms, rel=1e-12)


@pytest.mark.parametrize("spelling, grms", SPELLINGS, ids=[s for s, _ in SPELLINGS])
def test_same_spelling_same_unit_in_both_formats(spelling, grms):
    from_toml = parse_toml_profile(_toml(spelling), "p.toml")
    from_csv = parse_csv_profile(_csv(f"frequency (Hz), ASD ({spelling})"), "p.csv")
    assert list(from_toml.asd_g2_per_hz) == list(from_csv.asd_g2_per_hz)


def test_the_tools_own_csv_header_names_g2_per_hz(tmp_path):
    # The writer's header 'frequency_hz,asd_g2_per_hz' reads back as g^2/Hz, value for value.
    profile = parse_toml_profile(_toml("m^2/s^4/Hz"), "p.toml")
    again = parse_csv_profile(format_csv_profile(profile), "again.csv")
    assert list(again.asd_g2_per_hz) == list(profile.asd_g2_per_hz)
    assert parse_csv_profile(_csv("frequency_hz,asd_m2_per_s4_per_hz"), "p.csv").grms == pytest.approx(GRMS_IF_SI)


@pytest.mark.parametrize(
    "header",
    [
        "frequency (Hz) at 2 m/s belt speed, ASD (g^2/Hz)",  # m/s in the frequency column only
        "frequency (Hz) [m/s sensor], ASD (g2/Hz)",
        "frequency (m/s^2 axis, Hz), ASD (g²/Hz)",
    ],
)
def test_m_per_s_outside_the_asd_column_does_not_switch_the_unit(header):
    # Issue 10 item 1: such headers were divided by g0^2 = 96.17 (a 19.8 dB error).
    assert parse_csv_profile(_csv(header), "p.csv").grms == pytest.approx(GRMS_IF_G, rel=1e-12)


def test_a_table_without_header_is_g2_per_hz():
    assert parse_csv_profile("20,1\n2000,1\n", "p.csv").grms == pytest.approx(GRMS_IF_G, rel=1e-12)


REFUSED_HEADERS = [
    ("frequency, asd", "'asd'"),
    ("frequency (Hz), ASD (mm^2/s^4/Hz)", "'(mm^2/s^4/Hz)'"),  # a unit that only resembles an accepted one
    ("frequency (Hz), ASD (g/Hz)", "'(g/Hz)'"),
    ("frequency (Hz), ASD (kg2/Hz)", "'(kg2/Hz)'"),
    ("frequency (Hz), ASD (g^2/Hz = 96.17 (m/s^2)^2/Hz)", "g^2/Hz ('g2/hz') and (m/s^2)^2/Hz ('(m/s2)2/hz')"),
    ("frequency (Hz), ASD (m^2/s^4/Hz or g^2/Hz)", "g^2/Hz ('g2/hz') and (m/s^2)^2/Hz ('m2/s4/hz')"),
]


@pytest.mark.parametrize("header, token", REFUSED_HEADERS, ids=[h for h, _ in REFUSED_HEADERS])
def test_a_header_naming_no_unit_or_two_is_refused_in_one_line(tmp_path, header, token):
    path = tmp_path / "table.csv"
    path.write_text("# invented table\n" + _csv(header), encoding="utf-8")
    with pytest.raises(InputError) as caught:
        read_profile(path)
    message = str(caught.value)
    assert "\n" not in message
    assert str(path) in message and "row 2" in message  # the file and the header row
    assert repr(header) in message  # the header
    assert token in message  # the token found
    assert ACCEPTED_SPELLINGS in message  # the spellings accepted


def test_a_header_with_more_columns_than_the_table_is_refused():
    with pytest.raises(InputError, match="has 3 columns"):
        parse_csv_profile(_csv("frequency (Hz), ASD (g^2/Hz), note at 3 m/s"), "p.csv")


@pytest.mark.parametrize("unit", ["g/Hz", "mm^2/s^4/Hz", "(m/s)^2/Hz", "g^2", "g^2/Hz (m/s^2)^2/Hz"])
def test_toml_refuses_other_units_with_the_accepted_spellings(unit):
    with pytest.raises(InputError) as caught:
        parse_toml_profile(_toml(unit), "p.toml")
    message = str(caught.value)
    assert f"unknown unit '{unit}'" in message and ACCEPTED_SPELLINGS in message and "p.toml: unit:" in message


def test_token_matching_needs_whole_tokens():
    assert asd_unit("mm^2/s^4/Hz") is None
    assert asd_units_named_in("ASD (mm^2/s^4/Hz)") == []
    assert [u for u, _ in asd_units_named_in("asd_g2_per_hz")] == [G2_PER_HZ]
    assert [u for u, _ in asd_units_named_in("ASD [(m/s²)²/Hz]")] == [SI_ASD]


@settings(max_examples=60, deadline=None)
@given(
    st.sampled_from(SPELLINGS),
    st.lists(st.sampled_from(["", " ", "  "]), min_size=16, max_size=16),
    st.lists(st.booleans(), min_size=32, max_size=32),
)
def test_spaces_and_case_do_not_change_the_unit(pair, spaces, upper):
    spelling, grms = pair
    # Spaces are allowed around / ^ ( ) * and case is free; nothing else changes the unit.
    text = ""
    for index, char in enumerate(spelling):
        char = char.upper() if upper[index % 32] else char.lower()
        if char in "/^()" and spelling[index:index + 2] != "**":
            char = spaces[index % 16] + char + spaces[(index + 7) % 16]
        text += char
    assert parse_toml_profile(_toml(text), "p.toml").grms == pytest.approx(grms, rel=1e-12)
    assert parse_csv_profile(_csv(f"frequency (Hz), ASD ({text})"), "p.csv").grms == pytest.approx(grms, rel=1e-12)


def test_units_module_does_not_load_numpy():
    code = "import sys, vibsynth.profile.units; assert 'numpy' not in sys.modules, 'numpy loaded'"
    subprocess.run([sys.executable, "-c", code], check=True)
