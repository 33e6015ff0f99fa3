"""Tests for retina.eye.field: F/I/D vectors, the IGRF-14 lookup, input errors."""

import datetime as dt
import math
from pathlib import Path

import numpy as np
import pytest

from retina.errors import InputError
from retina.eye.field import IGRF_VALID, Field, decimal_year, field_at, field_vector


def test_field_vector_cardinal_directions():
    # Derived: B = F (cos I cos D, cos I sin D, sin I) in north-east-down.
    np.testing.assert_allclose(field_vector(50.0, 90.0, 0.0), [0, 0, 50e-6], atol=1e-20)
    np.testing.assert_allclose(field_vector(50.0, 0.0, 90.0), [0, 50e-6, 0], atol=1e-20)
    np.testing.assert_allclose(field_vector(50.0, -30.0, 0.0),
                               [50e-6 * math.sqrt(3) / 2, 0, -25e-6], atol=1e-20)


def test_field_vector_broadcasts():
    v = field_vector([40.0, 50.0], 60.0, [0.0, 10.0])
    assert v.shape == (2, 3)
    np.testing.assert_allclose(np.linalg.norm(v, axis=1), [40e-6, 50e-6], rtol=1e-14)


def test_field_round_trip_and_reversal():
    f = Field(48.3, 66.5, -4.2)
    g = Field.from_vector(f.vector)
    assert (g.F_uT, g.I_deg, g.D_deg) == pytest.approx((48.3, 66.5, -4.2), abs=1e-12)
    # Derived: reversing the polarity negates the vector.
    np.testing.assert_allclose(f.reversed().vector, -f.vector, atol=1e-20)
    np.testing.assert_allclose(np.linalg.norm(f.direction), 1.0)


def test_ppigrf_ships_igrf14_and_its_validity():
    # Source: IAGA Working Group V-MOD, International Geomagnetic Reference Field, 14th generation
    # (2024), valid 1900-2030.  The package's
    # default coefficient file must be the 14th generation with that validity.
    import ppigrf

    shc = Path(ppigrf.ppigrf.shc_fn_igrf14)
    lines = [ln for ln in shc.read_text().splitlines() if ln.strip()]
    assert "IGRF 14" in lines[0]
    params = next(ln for ln in lines if not ln.startswith("#")).split()
    assert (float(params[-2]), float(params[-1])) == IGRF_VALID == (1900.0, 2030.0)


# Source: The US/UK World Magnetic Model for 2025-2030, technical report (NOAA NCEI and BGS), official
# test values, 2025.0, height 0 km (transcribed).  IGRF and WMM differ by tens of nT: tolerance 100 nT
# and 0.2 degrees.
WMM2025 = [
    (80.0, 0.0, 6521.6, 145.9, 54791.5, 83.21, 1.28),
    (0.0, 120.0, 39677.8, -109.6, -10580.2, -14.93, -0.16),
    (-80.0, 240.0, 6117.5, 15751.9, -52022.5, -72.00, 68.78),
]


@pytest.mark.parametrize("lat, lon, X, Y, Z, inc, dec", WMM2025)
def test_igrf_matches_wmm2025_test_values(lat, lon, X, Y, Z, inc, dec):
    f = field_at(lat, lon, 0.0, 2025.0)
    np.testing.assert_allclose(f.components_nT, [X, Y, Z], atol=100.0)
    assert f.I_deg == pytest.approx(inc, abs=0.2)
    assert f.D_deg == pytest.approx(dec, abs=0.2)


def test_igrf_accepts_dates_and_wraps_longitude():
    a = field_at(52.0, 13.0, 0.0, dt.date(2020, 7, 2))
    b = field_at(52.0, 13.0 + 360.0, 0.0, "2020-07-02")
    np.testing.assert_allclose(a.vector, b.vector, rtol=1e-12)
    # Facts of the trade (common practice, no source): northern mid-latitudes have a steep
    # downward field of roughly 25-65 uT.
    assert 60 < a.I_deg < 75 and 25 < a.F_uT < 65


def test_igrf_at_the_pole_is_finite():
    # The horizontal directions are undefined at a pole; the lookup steps 1e-6 degrees off it.
    # Common practice, no source: the field near the geographic north pole is steep (I > 80).
    f = field_at(90.0, 0.0, 0.0, 2025.0)
    assert np.all(np.isfinite(f.vector)) and f.I_deg > 80


def test_decimal_year():
    # Derived: 2024 is a leap year (366 days); 2 July 00:00 is 31+29+31+30+31+30+1 = 183 days in,
    # half the year.
    assert decimal_year(dt.datetime(2024, 7, 2)) == pytest.approx(2024.5, abs=1e-12)
    assert decimal_year("2021-01-01") == 2021.0
    assert decimal_year(2030) == 2030.0


@pytest.mark.parametrize("kwargs, key", [
    (dict(lat_deg=91.0, lon_deg=0.0), "lat_deg"),
    (dict(lat_deg=float("nan"), lon_deg=0.0), "lat_deg"),
    (dict(lat_deg=0.0, lon_deg=0.0, date=1899.9), "date"),
    (dict(lat_deg=0.0, lon_deg=0.0, date="2031-01-01"), "date"),
    (dict(lat_deg=0.0, lon_deg=0.0, date="next tuesday"), "date"),
    (dict(lat_deg=0.0, lon_deg=0.0, alt_km=-50.0), "alt_km"),
])
def test_field_at_rejects_bad_input(kwargs, key):
    with pytest.raises(InputError) as e:
        field_at(**kwargs)
    assert e.value.key == key


def test_field_vector_rejects_bad_input():
    with pytest.raises(InputError, match="inclination"):
        field_vector(50.0, 95.0, 0.0)
    with pytest.raises(InputError, match="intensity"):
        Field(-1.0, 60.0)


def test_importing_the_eye_package_stays_light():
    # Common practice, no source (keep optional heavy imports inside functions): ppigrf and pandas
    # load only when an IGRF field is requested.
    import subprocess
    import sys

    code = "import sys, retina.eye; print('pandas' in sys.modules, 'ppigrf' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "False"]
