"""Tests for calibration.bands: quadrature, weights, reddening, the band CSV reader."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from analyse.errors import InputError
from calibration.bands import (
    Band,
    aerosol_optical_depth_angstrom,
    airmass_kasten_young1989,
    band_weights,
    bands_from_csv,
    default_bands,
    effective_wavelength_nm,
    effective_wavelength_table,
    gaussian_band,
    rayleigh_optical_depth_bodhaine1999,
    solar_spectrum_relative,
    transmission,
)

CENTRES_NM = {"r": 600.0, "g": 530.0, "b": 460.0}
SIGMA_NM = 30.0


# --- default bands and quadrature ----------------------------------------------------
@pytest.mark.parametrize("k", [5, 7, 9])
def test_flat_spectrum_no_extinction_gives_centres(k):
    for name, band in default_bands(k).items():
        assert band.wavelength_nm.shape == (k,)
        lam = effective_wavelength_nm(band, airmass=0.0, spectrum=None)
        assert lam == pytest.approx(CENTRES_NM[name], abs=1e-9)


def test_default_bands_describe_themselves():
    bands = default_bands()
    assert set(bands) == {"r", "g", "b"}
    for name, band in bands.items():
        assert band.name == name
        assert f"{CENTRES_NM[name]:g} +- 30" in band.description
        assert "from memory" in band.description
        assert band.sensitivity.sum() == pytest.approx(1.0)
        assert np.all(np.diff(band.wavelength_nm) > 0)


def _dense_effective_wavelength(centre, sigma, airmass):
    """Reference: brute-force integral of Gaussian x solar x transmission on 0.05 nm steps."""
    lam = np.linspace(250.0, 1000.0, 15001)
    w = np.exp(-0.5 * ((lam - centre) / sigma) ** 2)
    w = w * solar_spectrum_relative(lam) * transmission(lam, airmass)
    return np.trapezoid(w * lam, lam) / np.trapezoid(w, lam)


@pytest.mark.parametrize("airmass", [0.0, 10.0, 38.0])
def test_seven_nodes_match_dense_integration(airmass):
    # 7-node Gauss-Hermite against a dense integral of the same product; measured
    # differences <= 2.3e-4 nm even at the horizon (blue band, airmass 38). Tolerance
    # 0.002 nm: 10x that, far below the 0.1-nm level that matters for dispersion.
    for name, band in default_bands(7).items():
        quad = effective_wavelength_nm(band, airmass=airmass)
        dense = _dense_effective_wavelength(CENTRES_NM[name], SIGMA_NM, airmass)
        assert quad == pytest.approx(dense, abs=2e-3)


# --- weights -------------------------------------------------------------------------
def test_weights_sum_to_one_and_broadcast():
    band = default_bands()["g"]
    airmass = np.linspace(0.0, 38.0, 12).reshape(3, 4)
    w = band_weights(band, airmass=airmass)
    assert w.shape == (3, 4, 7)
    np.testing.assert_allclose(w.sum(axis=-1), 1.0, rtol=0, atol=1e-12)
    assert np.all(w >= 0)
    # each row equals the scalar call at that airmass
    np.testing.assert_allclose(w[1, 2], band_weights(band, airmass=airmass[1, 2]), rtol=1e-12)


def test_weights_are_sensitivity_times_spectrum_times_transmission():
    band = default_bands()["r"]
    lam = band.wavelength_nm
    expected = band.sensitivity * solar_spectrum_relative(lam) * transmission(lam, 5.0)
    got = band_weights(band, airmass=5.0)
    np.testing.assert_allclose(got, expected / expected.sum(), rtol=1e-12)


def test_weights_survive_huge_airmass_and_propagate_nan():
    band = default_bands()["b"]
    w = band_weights(band, airmass=[1e5, np.nan])
    assert np.all(np.isfinite(w[0])) and w[0].sum() == pytest.approx(1.0)
    assert w[0, -1] == pytest.approx(1.0)  # only the reddest node survives a huge path
    assert np.all(np.isnan(w[1]))


def test_negative_airmass_refused():
    with pytest.raises(ValueError, match="airmass"):
        band_weights(default_bands()["g"], airmass=-1.0)


def test_custom_spectrum_is_used():
    band = default_bands()["g"]
    # a spectrum rising with wavelength moves the mean redward of the centre
    lam = effective_wavelength_nm(band, spectrum=lambda x: x / 530.0)
    assert lam > CENTRES_NM["g"] + 1.0


# --- reddening -----------------------------------------------------------------------
def test_effective_wavelength_grows_with_airmass():
    airmass = np.linspace(0.0, 40.0, 81)
    for band in default_bands().values():
        lam = effective_wavelength_nm(band, airmass=airmass)
        assert lam.shape == airmass.shape
        assert np.all(np.diff(lam) > 0)


def test_table_reddens_as_sun_sinks():
    altitudes = np.array([60.0, 30.0, 10.0, 5.0, 2.0, 1.0, 0.0])
    for band in default_bands().values():
        alt, lam = effective_wavelength_table(band, altitudes)
        np.testing.assert_array_equal(alt, altitudes)
        assert np.all(np.diff(lam) > 0)
        assert lam[-1] - lam[0] > 10.0  # the horizon's extinction shifts bands by tens of nm
    _, below = effective_wavelength_table(default_bands()["g"], [-1.0])
    assert np.isnan(below[0])  # Kasten-Young is not valid below the horizon


def test_table_passes_extinction_options():
    band = default_bands()["g"]
    _, clear = effective_wavelength_table(band, [2.0], tau_aerosol_550=0.0)
    _, hazy = effective_wavelength_table(band, [2.0], tau_aerosol_550=0.5)
    assert hazy[0] > clear[0]


# --- spectrum and extinction pieces ---------------------------------------------------
def test_solar_spectrum_is_a_photon_planck_curve_at_5772K():
    assert solar_spectrum_relative(550.0) == pytest.approx(1.0)
    # Photon-count Planck curve peaks where x = hc/(lambda k T) solves x = 4 (1 - e^-x).
    x = brentq(lambda x: x - 4.0 * (1.0 - np.exp(-x)), 1.0, 10.0)
    peak_nm = 1.438776877e7 / (x * 5772.0)
    lam = np.linspace(peak_nm - 50, peak_nm + 50, 2001)
    found = lam[np.argmax(solar_spectrum_relative(lam))]
    assert found == pytest.approx(peak_nm, abs=0.1)  # an energy-unit curve would peak at 502 nm


def test_rayleigh_scales_with_pressure_and_gravity():
    base = rayleigh_optical_depth_bodhaine1999(550.0)
    half = rayleigh_optical_depth_bodhaine1999(550.0, pressure_hPa=506.625)
    assert half == pytest.approx(base / 2)
    # weaker gravity at the equator and at height: more air per hPa, larger tau
    assert rayleigh_optical_depth_bodhaine1999(550.0, latitude_deg=0.0) > base
    assert rayleigh_optical_depth_bodhaine1999(550.0, altitude_m=2000.0) > base
    assert np.isnan(rayleigh_optical_depth_bodhaine1999(150.0))
    assert np.all(np.diff(rayleigh_optical_depth_bodhaine1999([400.0, 500.0, 600.0])) < 0)


def test_kasten_young_nan_outside_range_and_monotonic():
    m = airmass_kasten_young1989([-1.0, 90.5, 120.0])
    assert np.all(np.isnan(m))
    z = np.linspace(0.0, 90.0, 91)
    assert np.all(np.diff(airmass_kasten_young1989(z)) > 0)


def test_angstrom_power_law():
    assert aerosol_optical_depth_angstrom(550.0, 0.2, 1.3) == pytest.approx(0.2)
    assert aerosol_optical_depth_angstrom(1100.0, 0.2, 1.3) == pytest.approx(0.2 * 2.0**-1.3)
    with pytest.raises(ValueError):
        aerosol_optical_depth_angstrom(550.0, -0.1)


def test_transmission_broadcasts_and_multiplies():
    lam = np.array([450.0, 550.0, 650.0])
    airmass = np.array([[0.0], [1.0], [2.0]])
    t = transmission(lam, airmass)
    assert t.shape == (3, 3)
    np.testing.assert_allclose(t[0], 1.0)
    np.testing.assert_allclose(t[2], t[1] ** 2, rtol=1e-12)
    tau = rayleigh_optical_depth_bodhaine1999(lam) + aerosol_optical_depth_angstrom(lam)
    np.testing.assert_allclose(t[1], np.exp(-tau), rtol=1e-12)


def test_band_validates_and_is_read_only():
    with pytest.raises(ValueError):
        Band("g", np.array([530.0, 520.0]), np.array([1.0, 1.0]), "unsorted")
    with pytest.raises(ValueError):
        Band("g", np.array([520.0, 530.0]), np.array([1.0, -1.0]), "negative")
    band = gaussian_band("g", 530.0, 30.0, 5)
    with pytest.raises(ValueError):
        band.wavelength_nm[0] = 1.0


# --- CSV -----------------------------------------------------------------------------
def _write_gaussian_csv(path: Path, columns=("wavelength_nm", "r", "g", "b")):
    """Gaussian channels tabulated every 5 nm (a typical datasheet step), 250-850 nm."""
    lam = np.arange(250.0, 851.0, 5.0)
    cols = {"wavelength_nm": lam}
    for name, centre in CENTRES_NM.items():
        cols[name] = np.exp(-0.5 * ((lam - centre) / SIGMA_NM) ** 2)
    lines = ["# synthetic Gaussian bands for a test", ",".join(columns)]
    lines += [",".join(f"{cols[c][i]:.10g}" for c in columns) for i in range(lam.size)]
    path.write_text("\n".join(lines) + "\n")
    return path


def test_csv_round_trip_gaussians(tmp_path):
    path = _write_gaussian_csv(tmp_path / "bands.csv")
    bands = bands_from_csv(path)
    defaults = default_bands()
    for name, band in bands.items():
        assert band.name == name and "bands.csv" in band.description
        # flat spectrum, no extinction: the rule keeps the curve's mean (measured < 1e-5 nm)
        flat = effective_wavelength_nm(band, spectrum=None)
        assert flat == pytest.approx(CENTRES_NM[name], abs=1e-3)
        # The Gauss rule of a tabulated Gaussian is the Gauss-Hermite rule. Measured node
        # differences 0.0095 nm from interpolating a 5-nm table; tolerance 0.02 nm.
        np.testing.assert_allclose(band.wavelength_nm, defaults[name].wavelength_nm, atol=0.02)
        # at the horizon (airmass 38) measured 0.0018 nm apart; tolerance 0.005 nm
        horizon = effective_wavelength_nm(band, airmass=38.0)
        expected = effective_wavelength_nm(defaults[name], airmass=38.0)
        assert horizon == pytest.approx(expected, abs=5e-3)


def test_csv_column_order_free_and_node_count(tmp_path):
    path = _write_gaussian_csv(tmp_path / "b.csv", columns=("g", "wavelength_nm", "b", "r"))
    bands = bands_from_csv(path, n_wavelengths=5)
    assert bands["g"].wavelength_nm.size == 5
    assert effective_wavelength_nm(bands["r"], spectrum=None) == pytest.approx(600.0, abs=1e-3)


def test_csv_skewed_curve_keeps_its_moments(tmp_path):
    # A skewed curve: a gamma shape x^3 e^-x, x = (lambda - 400 nm) / 20 nm, tabulated every
    # 2 nm. Its moments are analytic (gamma distribution, k = 4, theta = 20 nm): mean 480 nm,
    # variance k theta^2 = 1600 nm^2, third central moment 2 k theta^3 = 64000 nm^3. The
    # truncation at 800 nm removes ~1e-6 of the mass; tolerances cover that and the
    # interpolation of the table.
    lam = np.arange(400.0, 801.0, 2.0)
    x = (lam - 400.0) / 20.0
    curve = x**3 * np.exp(-x)
    flat = np.ones_like(lam)
    rows = [f"{a},{c:.12g},{f},{f}" for a, c, f in zip(lam, curve, flat)]
    lines = ["wavelength_nm,r,g,b", *rows]
    path = tmp_path / "gamma.csv"
    path.write_text("\n".join(lines))
    band = bands_from_csv(path)["r"]
    w, nodes = band.sensitivity, band.wavelength_nm
    mean = np.sum(w * nodes)
    assert mean == pytest.approx(480.0, abs=0.01)
    assert np.sum(w * (nodes - mean) ** 2) == pytest.approx(1600.0, rel=1e-3)
    assert np.sum(w * (nodes - mean) ** 3) == pytest.approx(64000.0, rel=1e-2)
    assert 400.0 < nodes[0] and nodes[-1] < 800.0 and np.all(w > 0)
    # the flat column's rule is Gauss-Legendre on 400-800 nm: mean 600, variance 400^2/12
    g = bands_from_csv(path)["g"]
    assert np.sum(g.sensitivity * g.wavelength_nm) == pytest.approx(600.0, abs=1e-6)
    var = np.sum(g.sensitivity * (g.wavelength_nm - 600.0) ** 2)
    assert var == pytest.approx(400.0**2 / 12.0, rel=1e-6)


HEADER = "wavelength_nm,r,g,b\n"
GOOD_ROWS = ["400,1,1,1", "450,1,1,1", "500,1,1,1", "550,1,1,1", "600,1,1,1"]


def _table(*replace: tuple[int, str], header: str = HEADER) -> str:
    """A valid 5-row table with some rows replaced (index into GOOD_ROWS)."""
    rows = list(GOOD_ROWS)
    for index, row in replace:
        rows[index] = row
    return header + "\n".join(rows) + "\n"


# case: (file text, expected message); file line numbers count the header as line 1
BAD_CSVS = {
    "negative": (_table((2, "500,1,-0.5,1")), r"negative value -0\.5 in column g line 4"),
    "unsorted": (_table((2, "440,1,1,1")), r"not strictly increasing: 440 nm on line 4"),
    "missing_column": (
        "wavelength_nm,r,b\n" + "\n".join(r[: r.rindex(",")] for r in GOOD_ROWS),
        r"missing column 'g'",
    ),
    "empty": ("", r"empty"),
    "comments_only": ("# nothing\n\n", r"empty"),
    "non_numeric": (_table((1, "450,1,x,1")), r"column g line 3: 'x' is not a number"),
    "too_few_rows": (HEADER + "400,1,1,1\n450,1,1,1\n", r"only 2 data rows"),
    "micrometres": (
        _table(*((i, f"0.{4 + i},1,1,1") for i in range(5))), r"must be in nanometres"
    ),
    "zero_channel": (
        _table(*((i, r[: r.rindex(",")] + ",0") for i, r in enumerate(GOOD_ROWS))),
        r"column b is zero everywhere",
    ),
    "ragged": (_table((1, "450,1,1")), r"line 3 has 3 fields"),
    "unknown_column": ("wavelength_nm,r,g,b,ir\n400,1,1,1,1\n", r"unknown or repeated column"),
    "nan": (_table((1, "450,nan,1,1")), r"not finite"),
    "ultraviolet": (
        HEADER + "\n".join(f"{w},{int(w > 350)},{int(w > 350)},{int(w < 320)}"
                            for w in range(250, 451, 10)),
        r"column b .* below the refractivity model's 300 nm",
    ),
}


@pytest.mark.parametrize("case", sorted(BAD_CSVS))
def test_bad_csv_raises_input_error_naming_file(tmp_path, case):
    text, pattern = BAD_CSVS[case]
    path = tmp_path / f"{case}_sensor.csv"
    path.write_text(text)
    with pytest.raises(InputError, match=pattern) as info:
        bands_from_csv(path)
    message = str(info.value)
    assert f"{case}_sensor.csv" in message
    assert "\n" not in message


def test_missing_csv_file(tmp_path):
    with pytest.raises(InputError, match="cannot read") as info:
        bands_from_csv(tmp_path / "nope.csv")
    assert "nope.csv" in str(info.value)
