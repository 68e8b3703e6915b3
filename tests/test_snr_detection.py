"""Detection by signal-to-noise ratio (detection = "snr"): budget wiring, scalings, exozodi draws, time."""

import math
import pickle
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from sweep import params, streams
from sweep.blocks import RowBlock
from sweep.concepts import build_concept, parse_concept
from sweep.concepts.noise_budget import reference_planets, star_uniforms
from sweep.errors import UserInputError
from sweep.physics import noise as nz
from sweep.physics import orbits, photometry, radiation, sky
from sweep.physics._constants import PC_M, R_SUN_M
from sweep.structs import PlanetBatch, StarTable

REPO = Path(__file__).resolve().parents[1]
FEW = settings(max_examples=20, deadline=None)


# -- helpers -------------------------------------------------------------------------------------

def make_stars(rng, n):
    lum = rng.uniform(0.1, 2.0, n)
    teff = 5772.0 * lum ** 0.13
    radius = np.sqrt(lum) * (5772.0 / teff) ** 2  # Stefan-Boltzmann
    return StarTable(
        name=np.array([f"s{i}" for i in range(n)]), distance_pc=rng.uniform(3.0, 15.0, n), teff_K=teff,
        radius_rsun=radius, mass_msun=np.ones(n), luminosity_lsun=lum, spectral_class=np.full(n, 1, np.int8),
        ecliptic_latitude_deg=np.where(np.arange(n) % 3 == 0, np.nan, rng.uniform(-90, 90, n)))


def make_planets(rng, n, n_stars, n_rows):
    a = rng.uniform(0.3, 3.0, n)
    zeros = np.zeros(n)
    inc, omega, mean = np.arccos(rng.uniform(-1, 1, n)), rng.uniform(0, 2 * np.pi, n), rng.uniform(0, 2 * np.pi, n)
    sep, dist, phase = orbits.sky_geometry(a, zeros, inc, omega, mean)
    full = lambda v: np.full(n, float(v))  # noqa: E731
    return PlanetBatch(
        row=np.sort(rng.integers(0, n_rows, n)), star=rng.integers(0, n_stars, n),
        radius_rearth=rng.uniform(0.5, 3.0, n), period_d=full(365.0), semi_major_axis_au=a, eccentricity=zeros,
        inclination_rad=inc, arg_periapsis_rad=omega, mean_anomaly_rad=mean, bond_albedo=full(0.3),
        geometric_albedo=rng.uniform(0.1, 0.5, n), teq_K=rng.uniform(150.0, 450.0, n), insolation_searth=full(1.0),
        mass_mearth=full(1.0), rv_semi_amplitude_ms=full(0.1), separation_au=sep, orbital_distance_au=dist,
        phase_angle_rad=phase)


def make_block(rows, seed=17, start=0):
    rows = np.asarray(rows)
    return RowBlock(0, start, start + len(rows), seed, rows.astype(np.int64), np.zeros(len(rows), np.int8), {})


def coronagraph(noise=None, **over):
    raw = dict(name="mirror", kind="coronagraph", detection="snr", aperture_diameter_m=6.0,
               inner_working_angle_lod=3.0, outer_working_angle_lod=30.0, throughput=0.2,
               bands=[dict(name="V", center_um=0.55, width_um=0.11), dict(name="I", center_um=0.8, width_um=0.15)],
               noise=dict(integration_time_h=20.0, raw_contrast=1e-10, systematic_fraction=0.02))
    return _section(raw, noise, over, "test.toml: concepts.mirror")


def interferometer(noise=None, **over):
    raw = dict(name="nuller", kind="interferometer", detection="snr", collector_diameter_m=2.0, baseline_m=20.0,
               bands=[dict(name="N10", center_um=10.0, width_um=2.0), dict(name="Q18", center_um=18.0, width_um=4.0)],
               noise=dict(integration_time_h=20.0, null_depth=1e-5, throughput=0.05))
    return _section(raw, noise, over, "test.toml: concepts.nuller")


def _section(raw, noise, over, where):
    """The default section with the noise table updated by ``noise`` and top-level keys by ``over``;
    the noise table is dropped for threshold detection, keys set to None are dropped."""
    raw["noise"] = {k: v for k, v in dict(raw["noise"], **(noise or {})).items() if v is not None}
    raw.update(over)
    if raw.get("detection") == "threshold":
        raw.pop("noise")
    return parse_concept({k: v for k, v in raw.items() if v is not None}, where)


MAKERS = {"coronagraph": coronagraph, "interferometer": interferometer}
DIAMETER = {"coronagraph": "aperture_diameter_m", "interferometer": "collector_diameter_m"}


def fixed(section):
    return params.resolve(section, f"concepts.{section.name}", lambda path, p: pytest.fail(f"unexpected {path}"))


def world(seed=3, n=3000, n_stars=12, n_rows=4):
    rng = np.random.default_rng(seed)
    stars = make_stars(rng, n_stars)
    return stars, make_planets(rng, n, n_stars, n_rows), make_block(np.arange(n_rows))


# -- the rates are the documented budget -------------------------------------------------------------

def test_coronagraph_rates_are_the_documented_budget():
    # consistency with sweep.physics (docs/noise_model.md, sec. 4): each rate recomputed here from
    # the physics functions, the exozodi level from the row's STAR_PROPERTIES stream (sec. 7, eq. 8)
    stars, planets, block = world()
    section = coronagraph(noise=dict(exozodi=dict(median_zodi=2.0, sigma_ln=0.7, scale=1.5),
                                     instrument=dict(dark_current_per_s=1e-3, read_noise_e=0.5, n_pixels=4.0,
                                                     frame_time_s=100.0, optics_temperature_K=270.0,
                                                     optics_emissivity=0.1)))
    concept = build_concept(section)
    got = concept.noise_rates(planets, stars, fixed(section), block)[1]  # band I
    u = np.stack([streams.row_generator(17, r, 0, streams.STAR_PROPERTIES).random(len(stars)) for r in range(4)])
    zodis = stats.lognorm.ppf(u, s=0.7, scale=2.0)[planets.row, planets.star] * 1.5  # scipy reference
    s, d = planets.star, stars.distance_pc[planets.star] * PC_M
    star_flux = radiation.blackbody_flux_density_uJy(0.8, 0.15, stars.teff_K[s], stars.radius_rsun[s] * R_SUN_M, d)
    contrast = radiation.reflected_contrast(planets.geometric_albedo, planets.phase_angle_rad,
                                            planets.radius_rearth, planets.orbital_distance_au)
    omega = photometry.resolution_element_sr(0.8, 6.0, 0.7)
    area = photometry.circular_area_m2(6.0)
    instrument = nz.detector_rate(1e-3, 0.5, 4.0, 100.0) + photometry.extended_source_rate(
        photometry.greybody_uJy_sr(0.8, 0.15, 270.0, 0.1), omega, 0.8, 0.15, area, 0.2)
    want = nz.coronagraph_rates(
        contrast * star_flux, star_flux, 1e-10, 0.8, 0.15, 6.0, 0.2,
        sky.local_zodi_uJy_sr(0.8, 0.15, stars.ecliptic_latitude_deg[s]),
        sky.exozodi_uJy_sr(0.8, 0.15, zodis, planets.separation_au, stars.luminosity_lsun[s], stars.teff_K[s]),
        instrument, 0.7)
    for name in want._fields:
        np.testing.assert_allclose(getattr(got, name), getattr(want, name), rtol=1e-12, err_msg=name)
    # SNR (eq. 9) with t = 20 h, k = 2 (the default), f = 0.02
    snr = concept.snr(planets, stars, fixed(section), block)[1]
    np.testing.assert_allclose(snr, nz.snr(want.signal, want.background, want.leak, 72000.0, 2.0, 0.02), rtol=1e-12)


def test_interferometer_rates_are_the_documented_budget():
    # consistency with sweep.physics (docs/noise_model.md, sec. 4 and 6): leak = (null depth +
    # (pi^2/16)(theta_* B / lambda)^2) x star rate; extended sources in one mode per collector x 1/2
    stars, planets, block = world(seed=5)
    section = interferometer(noise=dict(n_collectors=3.0, extended_transmission=0.4))
    got = build_concept(section).noise_rates(planets, stars, fixed(section), block)[0]  # band N10
    u = np.stack([streams.row_generator(17, r, 0, streams.STAR_PROPERTIES).random(len(stars)) for r in range(4)])
    zodis = stats.lognorm.ppf(u, s=1.0, scale=3.0)[planets.row, planets.star]  # defaults: median 3, sigma 1
    s, d = planets.star, stars.distance_pc[planets.star] * PC_M
    want = nz.interferometer_rates(
        radiation.blackbody_flux_density_uJy(10.0, 2.0, planets.teq_K, planets.radius_rearth * 6.3781e6, d),
        radiation.blackbody_flux_density_uJy(10.0, 2.0, stars.teff_K[s], stars.radius_rsun[s] * R_SUN_M, d),
        nz.stellar_angular_diameter_rad(stars.radius_rsun[s], stars.distance_pc[s]), 1e-5, 20.0, 10.0, 2.0, 2.0,
        3.0, 0.05, sky.local_zodi_uJy_sr(10.0, 2.0, stars.ecliptic_latitude_deg[s]),
        sky.exozodi_uJy_sr(10.0, 2.0, zodis, planets.separation_au, stars.luminosity_lsun[s], stars.teff_K[s]),
        0.0, 0.4)
    for name in want._fields:  # astropy's nominal Earth radius 6.3781e6 m (IAU 2015) is R_EARTH_M
        np.testing.assert_allclose(getattr(got, name), getattr(want, name), rtol=1e-12, err_msg=name)


# -- scalings: aperture and exozodi ------------------------------------------------------------------

@FEW
@given(seed=st.integers(0, 2**31), diameter=st.floats(1.0, 8.0), kind=st.sampled_from(sorted(MAKERS)),
       f=st.floats(0.0, 0.1))
def test_doubling_the_aperture(seed, diameter, kind, f):
    # analytic (docs/noise_model.md, sec. 3): planet and leak rates scale with the area (x4); zodi,
    # exozodi and instrument rates per resolution element do not change (A Omega ~ lambda^2), so
    # no SNR drops. Same planets, same exozodi draws (common random numbers).
    stars, planets, block = world(seed=seed % 1000, n=800)
    instrument = dict(dark_current_per_s=1e-3, read_noise_e=0.3, n_pixels=4.0, optics_temperature_K=250.0,
                      optics_emissivity=0.05)
    one, two = (MAKERS[kind](**{DIAMETER[kind]: d}, noise=dict(systematic_fraction=f, instrument=instrument))
                for d in (diameter, 2 * diameter))
    c1, c2 = build_concept(one), build_concept(two)
    pairs = zip(c1.noise_rates(planets, stars, fixed(one), block), c2.noise_rates(planets, stars, fixed(two), block))
    for r1, r2 in pairs:
        for name in ("signal", "leak", "per_uJy"):
            np.testing.assert_allclose(getattr(r2, name), 4 * getattr(r1, name), rtol=1e-12, err_msg=name)
        for name in ("zodi", "exozodi", "instrument"):
            np.testing.assert_allclose(getattr(r2, name), getattr(r1, name), rtol=1e-12, err_msg=name)
    snr1, snr2 = c1.snr(planets, stars, fixed(one), block), c2.snr(planets, stars, fixed(two), block)
    assert np.all(snr2 >= snr1 * (1 - 1e-12))


@FEW
@given(seed=st.integers(0, 2**31), scale=st.floats(0.0, 5.0), grow=st.floats(1.0, 10.0),
       kind=st.sampled_from(sorted(MAKERS)), budget=st.booleans())
def test_more_exozodi_never_raises_snr(seed, scale, grow, kind, budget):
    # analytic: the exozodi rate grows with the level and enters only the noise. In "budget" mode
    # the scale is a factor (uncertain), so the nominal ranking, taken at its median, is the same.
    stars, planets, block = world(seed=seed % 1000, n=800)
    noise = dict(exozodi=dict(scale={"dist": "uniform", "loc": 0.0, "scale": 50.0}))
    if budget:
        noise.update(time_allocation="budget", integration_time_h=None, total_time_h=60.0)
    section = MAKERS[kind](noise=noise)
    concept = build_concept(section)
    n_rows = len(block)

    def resolve(level):
        return params.resolve(section, f"concepts.{section.name}", lambda path, p: np.full(n_rows, level))

    low, high = resolve(scale), resolve(scale * grow)
    snr_low = concept.snr(planets, stars, low, block)
    snr_high = concept.snr(planets, stars, high, block)
    assert np.all(snr_high <= snr_low * (1 + 1e-12))
    assert not np.any(concept.detect(planets, stars, high, block) & ~concept.detect(planets, stars, low, block))


# -- threshold and SNR models agree at the SNR flux limit ---------------------------------------------

@pytest.mark.parametrize("kind", sorted(MAKERS))
def test_threshold_at_the_snr_flux_limit_detects_the_same_planets(kind):
    # analytic (docs/noise_model.md, sec. 8): SNR increases with the planet's flux, so a threshold
    # model whose flux limit is the SNR model's limit F_lim (eq. 11) for the same star and time
    # detects the same planets. The background must not depend on the planet: exozodi scale 0
    # (it varies with the separation). One star at a time (a flux limit is one number per band).
    rng = np.random.default_rng(41)
    stars = make_stars(rng, 3)
    n, t_h, k, n_sigma = 20_000, 30.0, 2.0, 5.0
    planets = make_planets(rng, n, 1, 1)
    planets.radius_rearth[:] = rng.uniform(0.3, 6.0, n)
    snr_section = MAKERS[kind](noise=dict(integration_time_h=t_h, systematic_fraction=0.0, exozodi=dict(scale=0.0)))
    concept = build_concept(snr_section)
    for index in range(len(stars)):
        one = StarTable(**{f: (getattr(stars, f)[[index]] if f != "magnitudes" else {})
                           for f in StarTable.__dataclass_fields__})
        snr_mask = concept.detect(planets, one, fixed(snr_section), make_block([0]))
        rates = concept.noise_rates(planets, one, fixed(snr_section))
        limits, approx, near, flux = [], [], [], []
        for r in rates:
            assert np.ptp(r.background) == 0.0 and np.ptp(r.per_uJy) == 0.0  # one background per band
            b, per_uJy = r.background[0], r.per_uJy[0]
            limits.append(nz.flux_limit_for_snr(n_sigma, t_h * 3600, b, r.leak[0], per_uJy, k, 0.0))
            # background-limited 5-sigma limit n sqrt(k B / t) / k_F; the exact limit is higher by
            # a + sqrt(1 + a^2), a = n / (2 sqrt(k B t)): the models may disagree within a + a^2/2
            approx.append(n_sigma * math.sqrt(k * b / (t_h * 3600)) / per_uJy)
            a = n_sigma / (2 * math.sqrt(k * b * t_h * 3600))
            assert a < 0.02  # background-limited: the stated tolerance is below 2 % of the limit
            flux.append(r.signal / per_uJy)
            near.append(np.abs(flux[-1] / approx[-1] - 1) <= (a + a * a / 2) * (1 + 1e-9))
        for limit_of, tolerance in ((limits, None), (approx, near)):
            scale = snr_section.throughput if kind == "coronagraph" else 1.0  # the threshold model's
            # coronagraph limit applies to the collected flux (after throughput), docs sec. 8
            bands = [dict(name=b.name, center_um=b.center_um, width_um=b.width_um, flux_limit_uJy=lim * scale)
                     for b, lim in zip(snr_section.bands, limit_of)]
            extra = dict(contrast_floor=1e-30) if kind == "coronagraph" else {}
            threshold = MAKERS[kind](detection="threshold", bands=bands, **extra)
            thr_mask = build_concept(threshold).detect(planets, one, fixed(threshold))
            for i in range(len(rates)):
                if tolerance is None:
                    clear = np.abs(flux[i] / limit_of[i] - 1) > 1e-9
                else:
                    clear = ~tolerance[i]
                assert clear.mean() > 0.95
                assert 0 < thr_mask[i][clear].sum() < clear.sum()
                np.testing.assert_array_equal(snr_mask[i][clear], thr_mask[i][clear])


# -- exozodi levels: per star, per row, whatever the block -------------------------------------------

def test_exozodi_draws_do_not_depend_on_the_block_size():
    # determinism (DESIGN.md, rows and seeds): the levels are keyed by (seed, base index,
    # population source); the same rows split over two blocks get the same levels and masks
    stars, planets, _ = world(seed=9, n=4000, n_rows=6)
    whole = make_block(np.arange(6), seed=23)
    parts = [(make_block(np.arange(0, 2), seed=23), slice(0, 2)),
             (make_block(np.arange(2, 6), seed=23, start=2), slice(2, 6))]
    for maker in MAKERS.values():
        section = maker(noise=dict(exozodi=dict(sigma_ln=1.2)))
        concept = build_concept(section)
        z_all = concept.exozodi_zodi(planets, stars, fixed(section), whole)
        mask_all = concept.detect(planets, stars, fixed(section), whole)
        for block, rows in parts:
            keep = (planets.row >= rows.start) & (planets.row < rows.stop)
            sub = planets.select(keep)
            sub.row = sub.row - rows.start
            fresh = build_concept(section)
            np.testing.assert_array_equal(fresh.exozodi_zodi(sub, stars, fixed(section), block), z_all[keep])
            np.testing.assert_array_equal(fresh.detect(sub, stars, fixed(section), block), mask_all[:, keep])
    # both kinds see the same dust around a star in a row (the draws belong to the population)
    a, b = (build_concept(m(noise=dict(exozodi=dict(sigma_ln=1.2)))) for m in MAKERS.values())
    np.testing.assert_array_equal(a.exozodi_zodi(planets, stars, fixed(a.section), whole),
                                  b.exozodi_zodi(planets, stars, fixed(b.section), whole))
    # without a block every star has the population median (scale 1)
    assert np.all(a.exozodi_zodi(planets, stars, fixed(a.section)) == 3.0)


def test_exozodi_levels_follow_the_prior():
    # statistical: ln z over 64 rows x 500 stars has mean ln(median) + ln(scale) and sd sigma, each
    # within 4 standard errors (docs/noise_model.md, eq. 8; lognormal)
    rng = np.random.default_rng(1)
    stars = make_stars(rng, 500)
    block = make_block(np.arange(64), seed=5)
    u = star_uniforms(block, len(stars))
    n = u.size
    z = nz.exozodi_level(u, 4.0, 0.8, 2.0)
    assert abs(np.log(z).mean() - math.log(8.0)) < 4 * 0.8 / math.sqrt(n)
    assert abs(np.log(z).std() - 0.8) < 4 * 0.8 / math.sqrt(2 * n)
    # different rows and different population sources give different draws
    other = RowBlock(0, 0, 64, 5, np.arange(64), np.ones(64, np.int8), {})
    assert not np.any(np.all(star_uniforms(other, len(stars)) == u, axis=1))


# -- integration time: per star and from a budget -----------------------------------------------------

def test_per_star_time_and_the_total_a_sweep_implies():
    # definition: per-star mode spends integration_time_h on every star; the nominal value of a
    # loguniform(a, b) factor is its median sqrt(a b) (scipy.stats.loguniform)
    stars, planets, block = world(n=200)
    section = coronagraph(noise=dict(integration_time_h={"dist": "loguniform", "a": 4.0, "b": 64.0}))
    concept = build_concept(section)
    assert concept.total_time_h(stars) == pytest.approx(len(stars) * 16.0, rel=1e-12)
    hours = np.array([1.0, 2.0, 3.0, 4.0])
    resolved = params.resolve(section, "concepts.mirror", lambda path, p: hours)
    np.testing.assert_array_equal(concept.integration_time_s(planets, stars, resolved), hours[planets.row] * 3600)
    threshold = coronagraph(detection="threshold", contrast_floor=1e-10,
                            bands=[dict(name="V", center_um=0.55, width_um=0.1, flux_limit_uJy=1e-3)])
    assert build_concept(threshold).total_time_h(stars) is None


@pytest.mark.parametrize("kind", sorted(MAKERS))
def test_time_budget_rule(kind):
    # definition of the rule (docs/noise_model.md, sec. 9): t_need brings the reference planet at
    # maximum elongation to the threshold; allocations never exceed the budget, row by row; stars
    # left out have no detection; the ranking is deterministic and survives pickling
    stars, planets, block = world(seed=13, n=3000, n_stars=25)
    section = MAKERS[kind](noise=dict(time_allocation="budget", integration_time_h=None,
                                      total_time_h={"dist": "uniform", "loc": 1e-3, "scale": 1e5}))
    concept = build_concept(section)
    need, expected = concept.reference_need(stars, concept.nominal_section())
    finite = np.isfinite(need)
    assert finite.sum() > 5
    budgets = np.array([0.1, 0.4, 0.7, 1.0]) * need[finite].sum() / 3600  # the last fits every star
    first = np.argmax(np.where(finite & (expected > 0), expected / need, -1.0))  # the best merit
    budgets[0] = max(budgets[0], need[first] / 3600 * (1 + 1e-9))
    resolved = params.resolve(section, f"concepts.{section.name}", lambda path, p: budgets)
    alloc = concept.time_allocation_s(stars, resolved)
    assert alloc.shape == (4, len(stars))
    assert np.all(alloc.sum(axis=1) <= budgets * 3600 * (1 + 1e-12))
    observed = (alloc > 0).sum(axis=1)
    assert 0 < observed[0] < observed[3] == finite.sum() and np.all(np.diff(observed) >= 0)
    taken = alloc > 0
    np.testing.assert_array_equal(alloc[taken], np.broadcast_to(need, alloc.shape)[taken])
    # the quadrature reference planet reaches the threshold exactly in t_need (eq. 10 inverts eq. 9)
    ref, quadrature = reference_planets(stars)
    nominal = concept.nominal_section()
    rates = concept.noise_rates(ref, stars, nominal)
    inside = concept.inside(ref, stars, nominal)
    k, f = nominal.noise.background_subtraction_k, nominal.noise.systematic_fraction
    best = np.argmin(np.stack([np.where(ok[quadrature], nz.time_to_snr(5.0, r.signal, r.background, r.leak, k, f)[
        quadrature], np.inf) for ok, r in zip(inside, rates)]), axis=0)
    r_best = [rates[b] for b in best]
    snr_at_need = np.array([nz.snr(r.signal[quadrature][s], r.background[quadrature][s], r.leak[quadrature][s],
                                   need[s], k, f) for s, r in enumerate(r_best) if finite[s]])
    np.testing.assert_allclose(snr_at_need, 5.0, rtol=1e-9)
    assert np.all((expected >= 0) & (expected <= 1)) and np.all(expected[~finite] == 0)
    # E: geometric completeness of the band that sets t_need (orientations inside its field)
    share = inside[:, ~quadrature].reshape(len(inside), len(stars), -1).mean(axis=2)
    np.testing.assert_array_equal(expected[finite], share[best, np.arange(len(stars))][finite])
    assert np.all(expected[finite] > 0)
    # a star that gets no time detects nothing; a star that gets time detects something somewhere
    mask = concept.detect(planets, stars, resolved, block).any(axis=0)
    no_time = alloc[planets.row, planets.star] == 0
    assert no_time.any() and not np.any(mask & no_time)
    # nominal total: the rule at the median budget, within it
    total = concept.total_time_h(stars)
    assert 0 < total <= stats.uniform(1e-3, 1e5).median()
    clone = pickle.loads(pickle.dumps(concept))
    assert len(pickle.dumps(concept)) < 20_000  # the cached ranking does not travel
    np.testing.assert_array_equal(clone.time_allocation_s(stars, resolved), alloc)


def test_time_budget_ranking_follows_the_grid_point():
    # a gridded aperture changes t_need; each grid point gets its own ranking, cached
    stars, planets, block = world(seed=2, n=500, n_stars=30)
    section = coronagraph(aperture_diameter_m={"grid": [3.0, 9.0]},
                          noise=dict(time_allocation="budget", integration_time_h=None, total_time_h=30.0))
    concept = build_concept(section)
    allocations = {}
    for d in (3.0, 9.0, 3.0):
        resolved = params.resolve(section, "concepts.mirror", lambda path, p: d)
        allocations.setdefault(d, []).append(concept.time_allocation_s(stars, resolved))
        fresh = build_concept(section).time_allocation_s(stars, resolved)
        np.testing.assert_array_equal(allocations[d][-1], fresh)
    np.testing.assert_array_equal(*allocations[3.0])
    assert (allocations[9.0][0] > 0).sum() > (allocations[3.0][0] > 0).sum()
    assert len(concept._allocation_cache) == 2


# -- parameter forms, the block hand-over and bad input ----------------------------------------------

@pytest.mark.parametrize("kind", sorted(MAKERS))
def test_per_row_factors_match_row_by_row_scalars(kind):
    stars, planets, block = world(seed=21, n=4000)
    suppression = {"coronagraph": dict(raw_contrast={"dist": "loguniform", "a": 1e-11, "b": 1e-9}),
                   "interferometer": dict(null_depth={"dist": "loguniform", "a": 1e-6, "b": 1e-4})}[kind]
    section = MAKERS[kind](noise=dict(integration_time_h={"dist": "loguniform", "a": 1.0, "b": 100.0},
                                      exozodi=dict(scale={"dist": "uniform", "loc": 0.0, "scale": 5.0}),
                                      **suppression))
    prefix = f"concepts.{section.name}"
    rng = np.random.default_rng(0)
    factors = {site.path: site.param.frozen().ppf(rng.uniform(size=4))
               for site in params.collect(section, prefix) if site.is_factor}
    assert len(factors) == 3
    resolved = params.resolve(section, prefix, lambda p, _: factors[p])
    together = build_concept(section).detect(planets, stars, resolved, block)
    assert 0 < together.sum() < together.size
    for r in range(4):
        alone = build_concept(section).detect(
            planets, stars, params.resolve(section, prefix, lambda p, _: float(factors[p][r])), block)
        np.testing.assert_array_equal(together[:, planets.row == r], alone[:, planets.row == r])


@pytest.mark.parametrize("kind", sorted(MAKERS))
@pytest.mark.parametrize("budget", [False, True])
def test_a_block_without_planets(kind, budget):
    stars, planets, block = world(n=10)
    noise = dict(time_allocation="budget", integration_time_h=None, total_time_h=50.0) if budget else {}
    section = MAKERS[kind](noise=noise)
    none = planets.select(np.zeros(len(planets), bool))
    assert build_concept(section).detect(none, stars, fixed(section), block).shape == (2, 0)


def test_the_block_keys_the_exozodi_draws_and_a_plugin_takes_it_too():
    # produced by this code: without the block every star gets the median exozodi level
    stars, planets, block = world(n=500)
    section = coronagraph(noise=dict(exozodi=dict(sigma_ln=2.0)))
    concept = build_concept(section)
    assert not np.array_equal(concept.detect(planets, stars, fixed(section), block=block),
                              concept.detect(planets, stars, fixed(section)))
    raw = dict(name="warm-eye", kind="plugin_concept.py:ThermalImager", aperture_diameter_m=4.0,
               inner_working_angle_lod=2.0, contrast_floor=1e-7,
               bands=[dict(name="N10", center_um=10.0, width_um=2.0, flux_limit_uJy=0.1)])
    plugin_section = parse_concept(raw, "s.toml: concepts.warm-eye", base_dir=REPO / "workflows")
    plugin = build_concept(plugin_section)  # draws nothing per star: the block changes nothing
    np.testing.assert_array_equal(plugin.detect(planets, stars, plugin_section, block=block),
                                  plugin.detect(planets, stars, plugin_section))


@pytest.mark.parametrize("maker, over, key", [
    (coronagraph, dict(noise=None), "noise"),
    (coronagraph, dict(detection="threshold", contrast_floor=1e-10,
                       bands=[dict(name="V", center_um=0.55, width_um=0.1, flux_limit_uJy=1e-3)]), "noise"),
    (coronagraph, dict(bands=[dict(name="V", center_um=0.55, width_um=0.1, flux_limit_uJy=1e-3)]), "flux_limit_uJy"),
    (interferometer, dict(bands=[dict(name="N", center_um=10.0, width_um=2.0, flux_limit_uJy=0.1)]), "flux_limit_uJy"),
    (coronagraph, dict(sensitivity_reference_diameter_m=6.0), "sensitivity_reference_diameter_m"),
    (coronagraph, dict(detection="threshold", noise=None,
                       bands=[dict(name="V", center_um=0.55, width_um=0.1, flux_limit_uJy=1e-3)]), "contrast_floor"),
    (interferometer, dict(detection="threshold", noise=None), "flux_limit_uJy"),
    (coronagraph, dict(detection="photons"), "detection"),
    (coronagraph, dict(noise=dict(raw_contrast=1e-10)), "integration_time_h"),
    (coronagraph, dict(noise=dict(raw_contrast=1e-10, integration_time_h=1.0, time_allocation="budget")),
     "total_time_h"),
    (coronagraph, dict(noise=dict(raw_contrast=1e-10, integration_time_h=1.0, total_time_h=9.0)), "total_time_h"),
    (coronagraph, dict(noise=dict(integration_time_h=1.0)), "raw_contrast"),
    (interferometer, dict(noise=dict(integration_time_h=1.0, throughput=0.1)), "null_depth"),
    (interferometer, dict(noise=dict(integration_time_h=1.0, null_depth=1.5, throughput=0.1)), "null_depth"),
    (coronagraph, dict(noise=dict(integration_time_h=-2.0, raw_contrast=1e-10)), "integration_time_h"),
    (coronagraph, dict(noise=dict(integration_time_h=1.0, raw_contrast=1e-10, exozodi=dict(scale=-1.0))), "scale"),
    (coronagraph, dict(noise=dict(integration_time_h=1.0, raw_contrast=1e-10, exozodi=dict(level=3.0))), "level"),
    (coronagraph, dict(noise=dict(integration_time_h=1.0, raw_contrast=1e-10,
                                  instrument=dict(optics_emissivity=0.1))), "optics_temperature_K"),
])
def test_bad_noise_parameters_give_one_line_naming_the_key(maker, over, key):
    raw = maker().model_dump(exclude_none=True)
    raw.update(over)
    with pytest.raises(UserInputError) as info:
        parse_concept({k: v for k, v in raw.items() if v is not None}, "test.toml: concepts.x")
    message = str(info.value)
    assert "\n" not in message and message.startswith("test.toml: concepts.x")
    assert key in message


def test_the_noise_budget_workflow():
    # the demo workflow validates, names its factors and implies a total time per survey
    from sweep.spec import load_spec

    spec = load_spec(REPO / "workflows" / "noise_budget.toml")
    names = [factor.name for factor in spec.factors()]
    for concept, suppression in (("mirror", "raw_contrast"), ("nuller", "null_depth")):
        for key in ("integration_time_h", suppression, "exozodi.scale"):
            assert f"concepts.{concept}.noise.{key}" in names
    assert "exozodi" in spec.sobol_inputs()
    model = spec.build_model()
    hours = {c.name: c.total_time_h(model.stars) for c in model.concepts}
    # 200 stars x the median of loguniform(4, 40) h = sqrt(160) h (scipy.stats.loguniform median)
    assert hours == {"mirror": pytest.approx(200 * math.sqrt(160.0)), "nuller": pytest.approx(200 * math.sqrt(160.0))}


def test_model_passes_the_block_so_exozodi_levels_are_drawn_per_star(monkeypatch):
    # The per-star exozodi uniforms come from the row's STAR_PROPERTIES stream; the model must pass
    # the block to detect() for them to be drawn (produced by this code: a wiring check).
    from sweep.concepts import noise_budget
    from sweep.design import build_rows
    from sweep.spec import load_spec

    calls = []
    real = noise_budget.star_uniforms

    def recording(block, n_stars):
        calls.append((block.index, n_stars))
        return real(block, n_stars)

    monkeypatch.setattr(noise_budget, "star_uniforms", recording)
    spec = load_spec(Path(__file__).resolve().parents[1] / "workflows" / "noise_budget.toml")
    spec.build_model().evaluate(build_rows(spec).block(0, 8))
    assert calls and all(index == 0 for index, _ in calls)
