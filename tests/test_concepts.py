"""Instrument concepts: geometry, flux and contrast limits, parameter forms, errors, plug-ins."""

import math
import pickle
import subprocess
import sys
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy import constants as const
from astropy.modeling.physical_models import BlackBody
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, optimize

from sweep import params
from sweep.concepts import build_concept, concept_schema, parse_concept
from sweep.concepts.interferometer import reference_orbit_au
from sweep.errors import UserInputError
from sweep.physics import habitability, orbits, radiation
from sweep.structs import PlanetBatch, StarTable

REPO = Path(__file__).resolve().parents[1]


# -- helpers -------------------------------------------------------------------------------------

def make_stars(distance_pc, teff_K=5772.0, radius_rsun=1.0, luminosity_lsun=1.0, magnitudes=None):
    distance_pc = np.atleast_1d(np.asarray(distance_pc, float))
    n = len(distance_pc)
    full = lambda v: np.broadcast_to(np.asarray(v, float), (n,)).copy()  # noqa: E731
    return StarTable(
        name=np.array([f"s{i}" for i in range(n)]), distance_pc=distance_pc, teff_K=full(teff_K),
        radius_rsun=full(radius_rsun), mass_msun=full(1.0), luminosity_lsun=full(luminosity_lsun),
        spectral_class=np.full(n, 1, np.int8), ecliptic_latitude_deg=np.zeros(n), magnitudes=magnitudes or {})


def make_planets(n, rng, a_au=1.0, star=None, n_rows=1, radius_rearth=1.0, teq_K=255.0,
                 geometric_albedo=0.3, eccentric=False):
    """Planets with isotropic orientations and random phases (geometry from physics.orbits)."""
    a = np.broadcast_to(np.asarray(a_au, float), (n,)).copy()
    e = rng.uniform(0.0, 0.5, n) if eccentric else np.zeros(n)
    inc = np.arccos(rng.uniform(-1.0, 1.0, n))
    omega = rng.uniform(0.0, 2 * np.pi, n)
    mean = rng.uniform(0.0, 2 * np.pi, n)
    sep, dist, phase = orbits.sky_geometry(a, e, inc, omega, mean)
    full = lambda v: np.broadcast_to(np.asarray(v, float), (n,)).copy()  # noqa: E731
    return PlanetBatch(
        row=rng.integers(0, n_rows, n), star=np.zeros(n, np.int64) if star is None else star,
        radius_rearth=full(radius_rearth), period_d=full(365.25), semi_major_axis_au=a, eccentricity=e,
        inclination_rad=inc, arg_periapsis_rad=omega, mean_anomaly_rad=mean, bond_albedo=full(0.3),
        geometric_albedo=full(geometric_albedo), teq_K=full(teq_K), insolation_searth=full(1.0),
        mass_mearth=full(1.0), rv_semi_amplitude_ms=full(0.09), separation_au=sep,
        orbital_distance_au=dist, phase_angle_rad=phase)


def interferometer(**over):
    raw = dict(name="nuller", kind="interferometer", collector_diameter_m=2.0, baseline_m=20.0,
               inner_limit_lambda_over_b=0.5, outer_limit_lod=1.0,
               bands=[dict(name="N10", center_um=10.0, width_um=2.0, flux_limit_uJy=0.1)])
    raw.update(over)
    return parse_concept(raw, "test.toml: concepts.nuller")


def coronagraph(**over):
    raw = dict(name="mirror", kind="coronagraph", aperture_diameter_m=6.0, inner_working_angle_lod=3.0,
               outer_working_angle_lod=30.0, contrast_floor=1e-10, throughput=0.3,
               bands=[dict(name="V", center_um=0.55, width_um=0.1, flux_limit_uJy=1e-3)])
    raw.update(over)
    return parse_concept(raw, "test.toml: concepts.mirror")


def fixed(section, prefix="concepts.x"):
    """Resolve a section whose parameters are all fixed (no grid, no factor)."""
    return params.resolve(section, prefix, lambda path, p: pytest.fail(f"unexpected parameter {path}"))


def binomial_z(k, n, p):
    return (k - n * p) / math.sqrt(n * p * (1 - p))


# -- geometric completeness ------------------------------------------------------------------------

@pytest.mark.parametrize("kind", ["interferometer", "coronagraph"])
def test_geometric_completeness_matches_brown_2004(kind):
    # One star, planets on circular 1 au orbits, isotropic: only the inner limit is active.
    rng = np.random.default_rng(20240601)
    n = 40_000
    d_pc = 10.0 if kind == "interferometer" else 3.0
    stars = make_stars(d_pc)
    planets = make_planets(n, rng, a_au=1.0, teq_K=300.0, radius_rearth=2.0)
    if kind == "interferometer":
        section = interferometer(baseline_m=12.0, outer_limit_lod=1e4,
                                 bands=[dict(name="N10", center_um=10.0, width_um=1.0, flux_limit_uJy=1e-12)])
        theta_in_rad = 0.5 * 10e-6 / 12.0
    else:
        section = coronagraph(aperture_diameter_m=2.4, inner_working_angle_lod=4.0, outer_working_angle_lod=1e4,
                              contrast_floor=1e-30, bands=[dict(name="V", center_um=0.55, width_um=0.1,
                                                                flux_limit_uJy=1e-30)])
        theta_in_rad = 4.0 * 0.55e-6 / 2.4
    detected = build_concept(section).detect(planets, stars, fixed(section))[0]
    x = theta_in_rad * (d_pc * u.pc).to_value(u.au)  # inner limit in units of a (a = 1 au)
    assert 0.3 < x < 0.9  # the limit cuts into the orbit
    expected = math.sqrt(1.0 - x * x)  # Brown 2004, ApJ 607, 1003: P(s > x a) for isotropic circular orbits
    assert abs(binomial_z(detected.sum(), n, expected)) < 4.0  # 4 standard errors


# -- flux-limit completeness -------------------------------------------------------------------------

def test_flux_limit_completeness_against_brentq_on_planck():
    # Fixed radius and orbit, Bond albedo uniform on [0, A_max]; angles are not limiting.
    rng = np.random.default_rng(7)
    n, a_max, a_au, d_pc, r_p = 40_000, 0.8, 1.0, 5.0, 1.5
    band = dict(name="N10", center_um=10.0, width_um=2.0)
    stars = make_stars(d_pc)
    bond = rng.uniform(0.0, a_max, n)
    teq = radiation.equilibrium_temperature_K(5772.0, 1.0, a_au, bond)
    planets = make_planets(n, rng, a_au=a_au, radius_rearth=r_p, teq_K=teq)
    planets.separation_au[:] = a_au  # face-on at quadrature: inside the field, outside the null

    # Independent reference: T_eq = T_eff sqrt(R / 2a) (1 - A)^(1/4) (Seager 2010, from memory),
    # band flux = pi (R_p/d)^2 (1/w) * integral of astropy's B_nu over wavelength (astropy, scipy quad).
    def band_flux_uJy(temperature):
        bb = BlackBody(temperature=temperature * u.K)
        lo, hi = 9.0, 11.0
        mean = integrate.quad(lambda lam: bb((lam * u.um)).to_value(u.W / (u.m**2 * u.Hz * u.sr)), lo, hi)[0] / 2.0
        ratio = (r_p * const.R_earth / (d_pc * u.pc)).decompose().value
        return (np.pi * mean * ratio**2 * u.W / (u.m**2 * u.Hz)).to_value(u.uJy)

    def teq_reference(albedo):
        return 5772.0 * math.sqrt((1.0 * const.R_sun / (2 * a_au * const.au)).decompose().value) * (1 - albedo) ** 0.25

    a_threshold = 0.45
    limit = band_flux_uJy(teq_reference(a_threshold))
    # brentq finds the albedo where the band flux equals the limit (scipy)
    found = optimize.brentq(lambda albedo: band_flux_uJy(teq_reference(albedo)) - limit, 0.0, a_max, xtol=1e-10)
    assert found == pytest.approx(a_threshold, abs=1e-6)
    section = interferometer(baseline_m=40.0, bands=[dict(band, flux_limit_uJy=limit)])
    detected = build_concept(section).detect(planets, stars, fixed(section))[0]
    expected = found / a_max  # flux falls with albedo: detected where A < threshold
    assert abs(binomial_z(detected.sum(), n, expected)) < 4.0  # 4 standard errors
    assert np.all(detected == (bond < found) | (np.abs(bond - found) < 1e-6))


# -- contrast and thermal flux of an Earth twin --------------------------------------------------------

def test_earth_twin_contrast_and_thermal_flux():
    stars = make_stars(10.0)
    rng = np.random.default_rng(0)
    planets = make_planets(1, rng, a_au=1.0, teq_K=255.0, geometric_albedo=0.367)
    planets.phase_angle_rad[:] = np.pi / 2  # quadrature
    planets.orbital_distance_au[:] = 1.0
    corona = build_concept(coronagraph())
    contrast = float(corona.contrast(planets)[0])
    # Earth at quadrature: about 2e-10 (common practice; Earth's geometric albedo 0.367, from memory)
    assert 1.8e-10 < contrast < 2.3e-10
    expected = 0.367 / np.pi * (const.R_earth / const.au).decompose().value ** 2  # Lambert sphere at 90 deg
    assert contrast == pytest.approx(expected, rel=1e-10)

    section = interferometer(bands=[dict(name="N10", center_um=10.0, width_um=0.05, flux_limit_uJy=0.1)])
    flux = float(build_concept(section).thermal_flux_uJy(planets, stars, fixed(section))[0, 0])
    # astropy BlackBody at 10 um, F = pi B_nu (R/d)^2 (astropy); a narrow band matches to 1e-4
    bb = BlackBody(temperature=255.0 * u.K)(10.0 * u.um)
    reference = (np.pi * u.sr * bb * (const.R_earth / (10 * u.pc)) ** 2).to_value(u.uJy)
    assert flux == pytest.approx(reference, rel=1e-4)
    assert 0.1 < flux < 0.5  # a few tenths of a uJy (issue 4; from memory)


def test_star_flux_from_blackbody_or_magnitude():
    stars = make_stars([10.0, 10.0], magnitudes={"V": np.array([4.83, np.nan])})
    band_raw = dict(name="V", center_um=0.55, width_um=0.01, flux_limit_uJy=1e-3, zero_point_Jy=3640.0)
    concept = build_concept(coronagraph(bands=[band_raw]))
    band = fixed(concept.section).bands[0]
    flux = concept.star_flux_uJy(band, stars)
    assert flux[0] == pytest.approx(3640.0e6 * 10 ** (-0.4 * 4.83), rel=1e-12)  # m = -2.5 log10(F / F0)
    bb = BlackBody(temperature=5772.0 * u.K)(0.55 * u.um)  # astropy, Sun twin at 10 pc
    reference = (np.pi * u.sr * bb * (const.R_sun / (10 * u.pc)) ** 2).to_value(u.uJy)
    assert flux[1] == pytest.approx(reference, rel=1e-3)
    # The Sun's V magnitude at 10 pc (M_V = 4.83, from memory) and a 3640 Jy zero point agree with
    # its blackbody to about 10 per cent (the Sun is no blackbody).
    assert flux[1] == pytest.approx(flux[0], rel=0.15)


def test_limiting_magnitude_equals_flux_limit():
    stars = make_stars([3.0, 8.0, 15.0])
    rng = np.random.default_rng(3)
    planets = make_planets(3000, rng, a_au=rng.uniform(0.5, 3.0, 3000), star=rng.integers(0, 3, 3000))
    zp, mag = 3640.0, 29.0
    by_mag = coronagraph(bands=[dict(name="V", center_um=0.55, width_um=0.1, limiting_mag=mag, zero_point_Jy=zp)])
    by_flux = coronagraph(bands=[dict(name="V", center_um=0.55, width_um=0.1, flux_limit_uJy=zp * 1e6 * 10 ** (-0.4 * mag))])
    d1 = build_concept(by_mag).detect(planets, stars, fixed(by_mag))
    d2 = build_concept(by_flux).detect(planets, stars, fixed(by_flux))
    assert 0 < d1.sum() < d1.size
    np.testing.assert_array_equal(d1, d2)


# -- per-star baseline --------------------------------------------------------------------------------

def test_tuned_baseline_puts_habitable_zone_centre_on_first_maximum():
    stars = make_stars([1.3, 5.0, 10.0, 20.0, 90.0], teff_K=[5772, 4500, 5772, 6200, 5000],
                       luminosity_lsun=[1.0, 0.2, 1.0, 2.0, 0.5])
    tuning = dict(min_m=10.0, max_m=100.0, orbit="habitable-zone-centre", wavelength_um=15.0)
    section = interferometer(baseline_m=None, baseline_tuning=tuning)
    concept = build_concept(section)
    planets = make_planets(5, np.random.default_rng(1), star=np.arange(5))
    baseline = concept.baseline_m(planets, stars, fixed(section))
    for i in range(5):  # reference: one star at a time, Kopparapu et al. 2014 limits from physics
        centre = 0.5 * (habitability.habitable_zone_distance_au(stars.luminosity_lsun[i], stars.teff_K[i], "runaway-greenhouse")
                        + habitability.habitable_zone_distance_au(stars.luminosity_lsun[i], stars.teff_K[i], "maximum-greenhouse"))
        theta = (centre * u.au / (stars.distance_pc[i] * u.pc)).decompose().value  # [rad]
        want = min(max(15e-6 / (2 * theta), 10.0), 100.0)  # first maximum of sin^2(pi B theta / lambda)
        assert baseline[i] == pytest.approx(want, rel=1e-12)
    assert baseline.min() == 10.0 and baseline.max() == 100.0  # both clips are exercised
    # at the first maximum the Bracewell transmission is 1 (Bracewell 1978)
    ok = (baseline > 10.0) & (baseline < 100.0)
    theta = reference_orbit_au(stars, "habitable-zone-centre") * (1 * u.au / u.pc).decompose().value / stars.distance_pc
    np.testing.assert_allclose(np.sin(np.pi * baseline[ok] * theta[ok] / 15e-6) ** 2, 1.0, rtol=1e-12)


# -- parameter forms: per-row factors and grid points --------------------------------------------------

def test_per_row_factors_match_row_by_row_scalars():
    rng = np.random.default_rng(11)
    n_rows, n = 4, 6000
    stars = make_stars(rng.uniform(3, 20, 8), teff_K=rng.uniform(3500, 6500, 8), luminosity_lsun=rng.uniform(0.1, 2, 8))
    planets = make_planets(n, rng, a_au=rng.uniform(0.3, 3.0, n), star=rng.integers(0, 8, n), n_rows=n_rows,
                           radius_rearth=rng.uniform(0.5, 3.0, n), teq_K=rng.uniform(150, 500, n),
                           geometric_albedo=rng.uniform(0.1, 0.5, n), eccentric=True)
    cases = [
        (interferometer(collector_diameter_m={"dist": "uniform", "loc": 1.0, "scale": 2.0},
                        baseline_m=None, baseline_tuning=dict(min_m={"dist": "uniform", "loc": 8, "scale": 4},
                                                              max_m=80.0, wavelength_um=12.0),
                        bands=[dict(name="N10", center_um={"dist": "uniform", "loc": 9, "scale": 2}, width_um=2.0,
                                    flux_limit_uJy={"dist": "loguniform", "a": 0.01, "b": 0.3})]), "concepts.nuller"),
        (coronagraph(aperture_diameter_m={"dist": "uniform", "loc": 4, "scale": 4},
                     contrast_floor={"dist": "loguniform", "a": 1e-11, "b": 1e-9},
                     throughput={"dist": "uniform", "loc": 0.1, "scale": 0.3},
                     bands=[dict(name="V", center_um={"dist": "uniform", "loc": 0.5, "scale": 0.1}, width_um=0.1,
                                 limiting_mag={"dist": "uniform", "loc": 27, "scale": 4}, zero_point_Jy=3640.0)]),
         "concepts.mirror"),
    ]
    for section, prefix in cases:
        factors = {site.path: site.param.frozen().ppf(rng.uniform(size=n_rows))
                   for site in params.collect(section, prefix) if site.is_factor}
        resolved = params.resolve(section, prefix, lambda path, p: factors[path])
        together = build_concept(section).detect(planets, stars, resolved)
        assert 0 < together.sum() < together.size
        for r in range(n_rows):  # reference: the scalar path, one row at a time
            scalar = params.resolve(section, prefix, lambda path, p: float(factors[path][r]))
            alone = build_concept(section).detect(planets, stars, scalar)
            np.testing.assert_array_equal(together[:, planets.row == r], alone[:, planets.row == r])


def test_grid_points_reuse_no_stale_values():
    # The same planets at several grid points (the model's loop): each equals a fresh concept's answer.
    rng = np.random.default_rng(5)
    stars = make_stars([4.0, 9.0])
    planets = make_planets(4000, rng, a_au=rng.uniform(0.3, 3.0, 4000), star=rng.integers(0, 2, 4000),
                           teq_K=rng.uniform(150, 450, 4000))
    section = interferometer(collector_diameter_m={"grid": [1.0, 2.0]},
                             bands=[dict(name="N", center_um={"grid": [8.0, 12.0]}, width_um=2.0, flux_limit_uJy=0.05),
                                    dict(name="Q", center_um=18.0, width_um=3.0, flux_limit_uJy=0.1)])
    concept = build_concept(section)
    for diameter in (1.0, 2.0):
        for center in (8.0, 12.0, 8.0):
            values = {"concepts.nuller.collector_diameter_m": diameter, "concepts.nuller.bands.N.center_um": center}
            resolved = params.resolve(section, "concepts.nuller", lambda path, p: values[path])
            fresh = build_concept(section).detect(planets, stars, resolved)
            np.testing.assert_array_equal(concept.detect(planets, stars, resolved), fresh)
    assert concept.band_names == ["N", "Q"]
    assert concept.band_wavelengths_um == [10.0, 18.0]  # median grid value, fixed value


# -- monotonicity with common random numbers ---------------------------------------------------------------

@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), diameter=st.floats(1.0, 8.0), grow=st.floats(1.0, 3.0),
       limit=st.floats(1e-4, 1.0), shrink=st.floats(0.05, 1.0), kind=st.sampled_from(["interferometer", "coronagraph"]))
def test_larger_aperture_or_lower_flux_limit_never_detects_fewer(seed, diameter, grow, limit, shrink, kind):
    # Same planets (common random numbers) in every configuration. The outer limit is out of reach:
    # with an active outer limit a larger aperture shrinks the field and may lose far planets.
    rng = np.random.default_rng(seed)
    n_rows, n = 3, 800
    stars = make_stars(rng.uniform(2, 25, 6), teff_K=rng.uniform(3500, 6500, 6), luminosity_lsun=rng.uniform(0.1, 3, 6))
    planets = make_planets(n, rng, a_au=rng.uniform(0.1, 5.0, n), star=rng.integers(0, 6, n), n_rows=n_rows,
                           radius_rearth=rng.uniform(0.5, 4.0, n), teq_K=rng.uniform(120, 600, n),
                           geometric_albedo=rng.uniform(0.05, 0.6, n), eccentric=True)
    if kind == "interferometer":
        def make(d, f):
            return interferometer(collector_diameter_m=d, baseline_m=30.0, outer_limit_lod=1e6,
                                  sensitivity_reference_diameter_m=2.0,
                                  bands=[dict(name="N", center_um=10.0, width_um=2.0, flux_limit_uJy=f),
                                         dict(name="Q", center_um=18.0, width_um=4.0, flux_limit_uJy=3 * f)])
    else:
        def make(d, f):
            return coronagraph(aperture_diameter_m=d, outer_working_angle_lod=1e6, contrast_floor=1e-11,
                               bands=[dict(name="V", center_um=0.55, width_um=0.1, flux_limit_uJy=f * 1e-3),
                                      dict(name="I", center_um=0.8, width_um=0.15, flux_limit_uJy=f * 2e-3)])

    def detect(d, f):
        section = make(d, f)
        return build_concept(section).detect(planets, stars, fixed(section))

    base = detect(diameter, limit)
    for better in (detect(diameter * grow, limit), detect(diameter, limit * shrink)):
        assert not np.any(base & ~better)  # every planet detected before is still detected
        per_row = lambda mask: np.bincount(planets.row[mask.any(axis=0)], minlength=n_rows)  # noqa: E731
        assert np.all(per_row(better) >= per_row(base))


# -- bad parameters: one clear error naming the key -----------------------------------------------------------

@pytest.mark.parametrize("maker, over, key", [
    (coronagraph, dict(inner_working_angle_lod=5.0, outer_working_angle_lod=5.0), "inner_working_angle_lod"),
    (coronagraph, dict(inner_working_angle_lod={"grid": [2.0, 12.0]}, outer_working_angle_lod=10.0),
     "outer_working_angle_lod"),
    (interferometer, dict(baseline_m=0.8), "inner_limit_lambda_over_b"),
    (interferometer, dict(inner_limit_lambda_over_b=2.0, outer_limit_lod=0.2), "outer_limit_lod"),
    (coronagraph, dict(bands=[dict(name="V", center_um=0.0, width_um=0.1, flux_limit_uJy=1.0)]), "bands.V.center_um"),
    (interferometer, dict(bands=[dict(name="N", center_um=-10.0, width_um=2.0, flux_limit_uJy=1.0)]), "bands.N.center_um"),
    (interferometer, dict(bands=[dict(name="N", center_um=10.0, width_um=25.0, flux_limit_uJy=1.0)]), "width_um"),
    (coronagraph, dict(aperture_diameter_m=0.0), "aperture_diameter_m"),
    (interferometer, dict(collector_diameter_m={"dist": "uniform", "loc": -1.0, "scale": 3.0}), "collector_diameter_m"),
    (coronagraph, dict(bands=[]), "bands"),
    (interferometer, dict(bands=[]), "bands"),
    (coronagraph, dict(bands=[dict(name="V", center_um=0.55, width_um=0.1)]), "flux_limit_uJy"),
    (coronagraph, dict(bands=[dict(name="V", center_um=0.55, width_um=0.1, limiting_mag=28.0)]), "zero_point_Jy"),
    (coronagraph, dict(throughput=1.5), "throughput"),
    (coronagraph, dict(aperture_m=6.0), "aperture_m"),
    (interferometer, dict(baseline_m=None), "baseline_m"),
    (interferometer, dict(baseline_tuning=dict(min_m=10.0, max_m=100.0, wavelength_um=10.0)), "baseline_tuning"),
    (interferometer, dict(baseline_m=None, baseline_tuning=dict(min_m=50.0, max_m=20.0, wavelength_um=10.0)), "min_m"),
    (coronagraph, dict(kind="telescope"), "kind"),
    (coronagraph, dict(kind="no_such_module_xyz:Thing"), "kind"),
    (coronagraph, dict(kind="missing_file.py:Thing"), "kind"),
])
def test_bad_parameters_give_one_line_naming_the_key(maker, over, key):
    with pytest.raises(UserInputError) as info:
        maker(**over)
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith("test.toml: concepts.")
    assert key in message


def test_unknown_kind_lists_the_known_ones():
    with pytest.raises(UserInputError, match="coronagraph, interferometer"):
        parse_concept({"name": "x", "kind": "lens"}, "s.toml: concepts[0]")
    with pytest.raises(UserInputError, match=r"concepts\[0\]\.kind"):
        parse_concept({"name": "x"}, "s.toml: concepts[0]")


# -- plug-ins ------------------------------------------------------------------------------------------------

def test_plugin_from_file_detects_and_pickles():
    raw = dict(name="warm-eye", kind="plugin_concept.py:ThermalImager", aperture_diameter_m={"grid": [4.0, 8.0]},
               inner_working_angle_lod=2.0, contrast_floor=1e-7,
               bands=[dict(name="N10", center_um=10.0, width_um=2.0, flux_limit_uJy=0.1)])
    section = parse_concept(raw, "s.toml: concepts.warm-eye", base_dir=REPO / "workflows")
    concept = build_concept(section)
    assert concept.name == "warm-eye" and concept.band_names == ["N10"]
    assert concept_schema(str(REPO / "workflows" / "plugin_concept.py") + ":ThermalImager") is type(section)
    rng = np.random.default_rng(2)
    stars = make_stars([1.5, 2.5])
    planets = make_planets(2000, rng, a_au=rng.uniform(0.2, 5.0, 2000), star=rng.integers(0, 2, 2000),
                           teq_K=rng.uniform(200, 600, 2000), radius_rearth=rng.uniform(1, 4, 2000))
    resolved = params.resolve(section, "concepts.warm-eye", lambda path, p: 4.0)
    detected = concept.detect(planets, stars, resolved)
    assert detected.shape == (1, 2000) and 0 < detected.sum() < 2000
    # a dask worker unpickles the concept and its section by importing the same file
    clone = pickle.loads(pickle.dumps(concept))
    np.testing.assert_array_equal(clone.detect(planets, stars, pickle.loads(pickle.dumps(resolved))), detected)
    with pytest.raises(UserInputError, match=r"concepts\.warm-eye\.bands\.N10\.flux_limit_uJy"):
        parse_concept(dict(raw, bands=[dict(name="N10", center_um=10.0, width_um=2.0, flux_limit_uJy=-1.0)]),
                      "s.toml: concepts.warm-eye", base_dir=REPO / "workflows")
    with pytest.raises(UserInputError, match="has no class 'Nope'"):
        parse_concept(dict(raw, kind="plugin_concept.py:Nope"), "s.toml: concepts.warm-eye", base_dir=REPO / "workflows")


def test_plugin_unpickles_in_a_fresh_interpreter(tmp_path):
    # What a dask worker process does: unpickle a concept whose class lives in a plug-in file.
    raw = dict(name="warm-eye", kind="plugin_concept.py:ThermalImager", aperture_diameter_m=4.0,
               inner_working_angle_lod=2.0, contrast_floor=1e-7,
               bands=[dict(name="N10", center_um=10.0, width_um=2.0, flux_limit_uJy=0.1)])
    concept = build_concept(parse_concept(raw, "s.toml: concepts.warm-eye", base_dir=REPO / "workflows"))
    blob = tmp_path / "concept.pkl"
    blob.write_bytes(pickle.dumps(concept))
    code = ("import pickle, sys; c = pickle.loads(open(sys.argv[1], 'rb').read()); "
            "print(type(c).__name__, c.name, c.band_names)")
    done = subprocess.run([sys.executable, "-c", code, str(blob)], capture_output=True, text=True, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["ThermalImager", "warm-eye", "['N10']"]


def test_builtin_concepts_pickle_without_their_cache():
    rng = np.random.default_rng(4)
    stars = make_stars([5.0])
    planets = make_planets(500, rng, teq_K=rng.uniform(200, 400, 500))
    section = interferometer()
    concept = build_concept(section)
    first = concept.detect(planets, stars, fixed(section))
    blob = pickle.dumps(concept)
    assert len(blob) < 20_000  # the cached block (planets, fluxes) does not travel
    np.testing.assert_array_equal(pickle.loads(blob).detect(planets, stars, fixed(section)), first)


@pytest.mark.parametrize("maker", [interferometer, coronagraph])
def test_a_block_without_planets(maker):
    planets = make_planets(5, np.random.default_rng(0)).select(np.zeros(5, bool))
    section = maker()
    assert build_concept(section).detect(planets, make_stars([5.0]), fixed(section)).shape == (1, 0)


def test_coronagraph_mask_is_the_documented_conjunction():
    # Each condition recomputed here with astropy units: angles, contrast floor, throughput x flux.
    rng = np.random.default_rng(21)
    n = 20_000
    stars = make_stars([1.5, 7.0, 12.0], teff_K=[5200.0, 5772.0, 6300.0], radius_rsun=[0.8, 1.0, 1.3])
    planets = make_planets(n, rng, a_au=rng.uniform(0.2, 6.0, n), star=rng.integers(0, 3, n),
                           radius_rearth=rng.uniform(0.5, 11.0, n), geometric_albedo=rng.uniform(0.05, 0.6, n),
                           eccentric=True)
    section = coronagraph(aperture_diameter_m=4.0, inner_working_angle_lod=3.0, outer_working_angle_lod=40.0,
                          contrast_floor=1e-9, throughput=0.25,
                          bands=[dict(name="V", center_um=0.55, width_um=0.1, flux_limit_uJy=0.05)])
    concept = build_concept(section)
    detected = concept.detect(planets, stars, fixed(section))[0]
    theta = (planets.separation_au * u.au / (stars.distance_pc[planets.star] * u.pc)).to_value(u.dimensionless_unscaled)
    lod = 0.55e-6 / 4.0
    contrast = radiation.reflected_contrast(planets.geometric_albedo, planets.phase_angle_rad,
                                            planets.radius_rearth, planets.orbital_distance_au)
    bb = BlackBody(temperature=stars.teff_K * u.K)(0.55 * u.um)  # astropy; 0.1 um band ~ monochromatic to 0.5 %
    star_flux = (np.pi * u.sr * bb * (stars.radius_rsun * const.R_sun / (stars.distance_pc * u.pc)) ** 2).to_value(u.uJy)
    flux = 0.25 * contrast * star_flux[planets.star]
    want = (theta >= 3 * lod) & (theta <= 40 * lod) & (contrast >= 1e-9) & (flux >= 0.05)
    near_edge = np.abs(flux / 0.05 - 1) < 0.01  # the band average differs slightly from B_nu at the centre
    assert want.sum() > 100 and (~want).sum() > 100
    np.testing.assert_array_equal(detected[~near_edge], want[~near_edge])
    for limit in ("angles", "contrast", "flux"):  # every condition removes some planets on its own
        others = {"angles": (contrast >= 1e-9) & (flux >= 0.05),
                  "contrast": (theta >= 3 * lod) & (theta <= 40 * lod) & (flux >= 0.05),
                  "flux": (theta >= 3 * lod) & (theta <= 40 * lod) & (contrast >= 1e-9)}[limit]
        assert (others & ~want).sum() > 10, limit


@pytest.mark.parametrize("maker, diameter_key", [(interferometer, "collector_diameter_m"),
                                                 (coronagraph, "aperture_diameter_m")])
def test_reference_diameter_scales_the_flux_limit_as_d_squared(maker, diameter_key):
    # Fixed integration time, background- or source-photon limited: F_lim ~ D^-2 (common practice).
    rng = np.random.default_rng(8)
    n = 5000
    stars = make_stars([2.0, 6.0])
    planets = make_planets(n, rng, a_au=rng.uniform(0.3, 4.0, n), star=rng.integers(0, 2, n),
                           teq_K=rng.uniform(150, 450, n), radius_rearth=rng.uniform(0.5, 3, n))
    band = maker().model_dump()["bands"][0]
    scaled = maker(**{diameter_key: 4.0, "sensitivity_reference_diameter_m": 2.0})
    plain = maker(**{diameter_key: 4.0, "bands": [dict(band, flux_limit_uJy=band["flux_limit_uJy"] / 4.0)]})
    a = build_concept(scaled).detect(planets, stars, fixed(scaled))
    b = build_concept(plain).detect(planets, stars, fixed(plain))
    assert 0 < a.sum() < a.size
    np.testing.assert_array_equal(a, b)
