"""Drawing planets: rates, within-bin densities, Poisson counts, determinism, common random numbers."""

import math
from dataclasses import fields
from pathlib import Path

import numpy as np
import pytest
import scipy.stats
from pydantic import TypeAdapter, ValidationError
from scipy.special import ndtr

from sweep import catalogs, occurrence, params, planets
from sweep.blocks import RowBlock
from sweep.structs import PlanetBatch, StarTable

from conftest import YEAR_D, sag13_expected

SECTION = TypeAdapter(occurrence.OccurrenceSection)
R_SUN_AU = 695700.0 / 149597870.7  # IAU 2015 nominal solar radius over the IAU 2012 au
FIELDS = [f.name for f in fields(PlanetBatch)]
ORBIT_FIELDS = ["row", "star", "radius_rearth", "period_d", "semi_major_axis_au", "eccentricity",
                "inclination_rad", "arg_periapsis_rad", "mean_anomaly_rad", "separation_au",
                "orbital_distance_au", "phase_angle_rad", "mass_mearth", "rv_semi_amplitude_ms"]


def sun_like(n, spectral_class=1):
    return StarTable(
        name=np.array([f"s{i}" for i in range(n)]), distance_pc=np.full(n, 10.0), teff_K=np.full(n, 5772.0),
        radius_rsun=np.ones(n), mass_msun=np.ones(n), luminosity_lsun=np.ones(n),
        spectral_class=np.full(n, spectral_class, dtype=np.int8), ecliptic_latitude_deg=np.full(n, np.nan))


def model(**section):
    return occurrence.build_occurrence(SECTION.validate_python(section), ".")


def make_block(factors, seed=2024, start=0, stop=None, source=0):
    """Rows start .. stop - 1 (all rows of ``factors`` by default), with their slice of the factor values."""
    stop = len(next(iter(factors.values()))) if stop is None else stop
    sliced = {k: np.asarray(v)[start:stop] for k, v in factors.items()}
    return RowBlock(index=0, start=start, stop=stop, seed=seed, base_index=np.arange(start, stop),
                    population_source=np.full(stop - start, source, dtype=np.int8), factors=sliced)


def resolve(priors, block):
    return params.resolve(priors, "planets", lambda path, param: block.factors[path])


def draw(occ, stars, factors, priors=None, **kw):
    block = make_block(factors, **kw)
    priors = planets.PriorsSection() if priors is None else priors
    return planets.draw_planets(block, stars, occ, resolve(priors, block))


# -- rates and densities --------------------------------------------------------------------------
@pytest.fixture(scope="module")
def large_draw():
    """SAG13 at its median rates: 2000 Sun-like stars x 60 rows = 1.2e5 star realisations."""
    occ = model(kind="power-law", preset="sag13", spread=1.5)
    n_rows, n_stars = 60, 2000
    batch = draw(occ, sun_like(n_stars), {"occurrence.rates": np.full(n_rows, 0.5)})
    return occ, batch, n_rows * n_stars


R_EDGES = [0.5, 1.0, 2.0, 3.4, 6.0, 16.0]
P_EDGES = [10.0, 40.0, 160.0, 640.0]


def test_mean_count_per_bin_is_the_rate_integral(large_draw):
    _, batch, n = large_draw
    observed, _, _ = np.histogram2d(batch.radius_rearth, batch.period_d, [R_EDGES, P_EDGES])
    expected = n * np.array([[sag13_expected(r1, r2, p1, p2) for p1, p2 in zip(P_EDGES, P_EDGES[1:])]
                             for r1, r2 in zip(R_EDGES, R_EDGES[1:])])
    # Poisson counts: chi-square with one degree of freedom per bin (fixed seed; fails by chance at 1e-3)
    statistic = ((observed - expected) ** 2 / expected).sum()
    assert scipy.stats.chi2.sf(statistic, observed.size) > 1e-3
    assert abs(len(batch) - expected.sum()) < 4 * math.sqrt(expected.sum())


def test_radii_and_periods_follow_the_power_law_within_a_bin(large_draw):
    _, batch, _ = large_draw
    alpha, beta = -0.19, 0.26  # SAG13 below 3.4 R_earth (from memory, Kopparapu et al. 2018)
    r = batch.radius_rearth[(batch.radius_rearth >= 1.0) & (batch.radius_rearth < 2.0)]
    # CDF of R^alpha dlnR on [1, 2]: (R^a - 1) / (2^a - 1) (analytic)
    assert scipy.stats.kstest(r, lambda x: (x**alpha - 1.0) / (2.0**alpha - 1.0)).pvalue > 1e-3
    small = batch.radius_rearth < 3.4
    p = batch.period_d[small & (batch.period_d >= 40.0) & (batch.period_d < 160.0)]
    assert scipy.stats.kstest(p, lambda x: (x**beta - 40.0**beta) / (160.0**beta - 40.0**beta)).pvalue > 1e-3


def test_counts_per_star_are_poisson(large_draw):
    _, batch, n = large_draw
    counts = np.bincount(batch.row * 2000 + batch.star, minlength=n)
    mean, variance = counts.mean(), counts.var(ddof=1)
    # dispersion index of a Poisson sample: var / mean = 1 with standard error sqrt(2 / (n - 1))
    assert abs(variance / mean - 1.0) < 4 * math.sqrt(2.0 / (n - 1))
    # the expected number per star is the model's analytic total
    assert mean == pytest.approx(sag13_expected(0.5, 16.0, 10.0, 640.0), abs=4 * math.sqrt(mean / n))


def test_rates_above_the_envelope_come_out_exact():
    occ = model(kind="power-law", preset="sag13", spread=2.0)
    q = np.full(20, 0.9999)  # rate 2^3.72 x nominal, above the envelope (2^2.33 x nominal)
    assert (occ.cell_rates({"occurrence.rates": q[:1]}) > occ.envelope).all()
    batch = draw(occ, sun_like(300), {"occurrence.rates": q})
    expected = 20 * 300 * occ.expected_planets_per_star({"occurrence.rates": q[:1]})[0, 1]
    assert abs(len(batch) - expected) < 4 * math.sqrt(expected)
    observed, _ = np.histogram(batch.radius_rearth, R_EDGES)
    scale = 2.0 ** scipy.stats.norm.ppf(0.9999)
    per_star = [sag13_expected(a, b, 10.0, 640.0) for a, b in zip(R_EDGES, R_EDGES[1:])]
    expected_bins = 20 * 300 * scale * np.array(per_star)
    assert scipy.stats.chi2.sf(((observed - expected_bins) ** 2 / expected_bins).sum(), len(observed)) > 1e-3


def test_binned_model_rates_and_log_uniform_bins():
    occ = model(kind="binned", table="sweep:binned_example.ecsv")
    stars = sun_like(3000, spectral_class=3)  # M dwarfs
    batch = draw(occ, stars, {"occurrence.rates": np.full(20, 0.5)})
    n = 20 * 3000
    lo_r, hi_r = np.exp(occ.lnr_lo[3]), np.exp(occ.lnr_hi[3])
    lo_p, hi_p = np.exp(occ.lnp_lo[3]), np.exp(occ.lnp_hi[3])
    inside = ((batch.radius_rearth[:, None] >= lo_r) & (batch.radius_rearth[:, None] < hi_r)
              & (batch.period_d[:, None] >= lo_p) & (batch.period_d[:, None] < hi_p))
    assert (inside.sum(axis=1) == 1).all()
    observed = inside.sum(axis=0)
    expected = n * occ.nominal[3]
    assert scipy.stats.chi2.sf(((observed - expected) ** 2 / expected).sum(), len(expected)) > 1e-3
    # log-uniform within a bin (scipy.stats.loguniform)
    radii = batch.radius_rearth[inside[:, 4]]
    assert scipy.stats.kstest(radii, "loguniform", args=(lo_r[4], hi_r[4])).pvalue > 1e-3


def test_a_class_without_rates_gets_no_planets():
    occ = model(kind="power-law", preset="sag13", uncertainty="none", classes={"F": {"scale": 0.0}})
    stars = sun_like(400)
    stars.spectral_class[:200] = 0  # F
    batch = draw(occ, stars, {}, stop=5)
    assert len(batch) > 0 and (batch.star >= 200).all()


# -- per-planet properties -------------------------------------------------------------------------
def test_orbits_albedos_and_derived_quantities():
    occ = model(kind="power-law", preset="sag13")
    stars = catalogs.read_star_table(Path(__file__).resolve().parents[1] / "workflows" / "stars_demo.ecsv")
    batch = draw(occ, stars, {"occurrence.rates": np.full(30, 0.5)})
    assert len(batch) > 1000
    # isotropic orbits: cos i uniform on [-1, 1]; uniform orbital phase
    assert scipy.stats.kstest(np.cos(batch.inclination_rad), "uniform", args=(-1, 2)).pvalue > 1e-3
    assert scipy.stats.kstest(batch.mean_anomaly_rad, "uniform", args=(0, 2 * np.pi)).pvalue > 1e-3
    assert (batch.eccentricity == 0).all()
    # default Bond albedo uniform on [0.1, 0.6]; Lambert sphere: p = 2 A_B / 3 (Seager 2010, from memory)
    assert scipy.stats.kstest(batch.bond_albedo, "uniform", args=(0.1, 0.5)).pvalue > 1e-3
    np.testing.assert_allclose(batch.geometric_albedo, 2.0 * batch.bond_albedo / 3.0, rtol=1e-15)
    # Kepler's third law in solar units: a^3 = (M_* + m_p) P^2 with a [au], P [yr] (common practice)
    total_mass = stars.mass_msun[batch.star] + batch.mass_mearth * 3.003e-6  # M_earth / M_sun (from memory)
    np.testing.assert_allclose(batch.semi_major_axis_au**3 / (batch.period_d / YEAR_D) ** 2, total_mass, rtol=2e-4)
    # T_eq = T_* sqrt(R_* / 2a) (1 - A_B)^(1/4) for full redistribution (Seager 2010, from memory)
    teq = (stars.teff_K[batch.star] * np.sqrt(stars.radius_rsun[batch.star] * R_SUN_AU / (2 * batch.semi_major_axis_au))
           * (1 - batch.bond_albedo) ** 0.25)
    np.testing.assert_allclose(batch.teq_K, teq, rtol=1e-10)
    np.testing.assert_allclose(batch.insolation_searth,
                               stars.luminosity_lsun[batch.star] / batch.semi_major_axis_au**2, rtol=1e-12)
    # circular orbits: the true distance is a and the separation a sin(phase angle)
    np.testing.assert_array_equal(batch.orbital_distance_au, batch.semi_major_axis_au)
    np.testing.assert_allclose(batch.separation_au, batch.semi_major_axis_au * np.sin(batch.phase_angle_rad),
                               rtol=1e-9, atol=1e-12)
    assert (batch.rv_semi_amplitude_ms >= 0).all() and (batch.mass_mearth > 0).all()
    assert batch.row.dtype == np.int64 and batch.star.dtype == np.int64
    assert all(len(getattr(batch, name)) == len(batch) for name in FIELDS)


def test_mass_and_rv_semi_amplitude_match_the_physics_functions():
    # the draw computes the mass from ln R and K from the semi-major axis; equal to rounding to
    # masses.chen_kipping2017_mass_mearth(R) and masses.rv_semi_amplitude_ms (produced by this code;
    # K's tolerance allows for sin(arccos(c)), less accurate than the draw's sqrt((1 - c)(1 + c)) near c = -1)
    from sweep.physics import masses
    occ = model(kind="power-law", preset="sag13", uncertainty="none")
    priors = planets.PriorsSection(eccentricity={"dist": "beta", "a": 0.867, "b": 3.03})
    stars = sun_like(200)
    stars.mass_msun[:] = np.linspace(0.1, 1.4, 200)
    batch = draw(occ, stars, {}, priors=priors, stop=10)
    assert len(batch) > 1000 and (batch.eccentricity > 0).any()
    np.testing.assert_allclose(batch.mass_mearth, masses.chen_kipping2017_mass_mearth(batch.radius_rearth),
                               rtol=1e-13)
    expected = masses.rv_semi_amplitude_ms(batch.mass_mearth, stars.mass_msun[batch.star], batch.period_d,
                                           batch.inclination_rad, batch.eccentricity)
    np.testing.assert_allclose(batch.rv_semi_amplitude_ms, expected, rtol=1e-9)


def test_priors_of_eccentricity_and_geometric_albedo():
    occ = model(kind="power-law", preset="sag13", uncertainty="none")
    priors = planets.PriorsSection(eccentricity={"dist": "beta", "a": 0.867, "b": 3.03},
                                   geometric_albedo={"dist": "uniform", "loc": 0.2, "scale": 0.3},
                                   redistribution="dayside")
    batch = draw(occ, sun_like(500), {}, priors=priors, stop=10)
    # eccentricity prior of Kipping 2013 (MNRAS 434, L51; values from memory)
    assert scipy.stats.kstest(batch.eccentricity, "beta", args=(0.867, 3.03)).pvalue > 1e-3
    assert scipy.stats.kstest(batch.geometric_albedo, "uniform", args=(0.2, 0.3)).pvalue > 1e-3
    # orbit-averaged flux of an eccentric orbit: L / (a^2 sqrt(1 - e^2)) in Earth units (Williams & Pollard
    # 2002, IJAsB 1, 61; from memory)
    np.testing.assert_allclose(batch.insolation_searth,
                               1.0 / (batch.semi_major_axis_au**2 * np.sqrt(1 - batch.eccentricity**2)), rtol=1e-12)
    r = batch.orbital_distance_au / batch.semi_major_axis_au
    assert ((r >= 1 - batch.eccentricity - 1e-12) & (r <= 1 + batch.eccentricity + 1e-12)).all()
    # dayside redistribution: f = 1/2 instead of 1/4, T_eq higher by 2^(1/4) (Cowan & Agol 2011, from memory)
    full = planets.draw_planets(make_block({}, stop=10), sun_like(500), occ,
                                priors.model_copy(update={"redistribution": "full"}))
    np.testing.assert_allclose(batch.teq_K / full.teq_K, 2 ** 0.25, rtol=1e-12)


def test_prior_ppf_with_per_row_hyperparameters_matches_scipy_one_by_one():
    prior = planets.Prior(dist="beta", a={"dist": "uniform", "loc": 1.0, "scale": 2.0}, b=3.0)
    resolved = params.resolve(prior, "p", lambda path, param: np.array([1.0, 1.5, 2.9]))
    rng = np.random.default_rng(0)
    q, row = rng.random(200), rng.integers(0, 3, 200)
    slow = [scipy.stats.beta(a=[1.0, 1.5, 2.9][r], b=3.0).ppf(x) for x, r in zip(q, row)]  # scipy, one at a time
    np.testing.assert_allclose(resolved.ppf(q, row), slow, rtol=1e-12)


def test_cells_are_chosen_in_proportion_to_the_envelope():
    # a zero-rate piece makes zero-width cells inside the class; a class without planets is skipped
    occ = model(kind="power-law", radius_rearth=[0.5, 16.0], cells_per_efold=2, pieces=[
        {"radius_max_rearth": 2.0, "gamma": 0.4, "alpha": -0.2, "beta": 0.3},
        {"radius_max_rearth": 4.0, "gamma": 0.0, "alpha": 0.0, "beta": 0.0},
        {"gamma": 0.7, "alpha": -1.2, "beta": 0.6}], classes={"F": {"scale": 0.0}})
    stars = sun_like(400)
    stars.spectral_class[:] = np.arange(400) % 3 + 1  # G, K, M
    layout = planets._Layout(stars, occ)
    rng = np.random.default_rng(2)
    star = rng.integers(0, 400, 300000)
    u = np.concatenate([rng.random(299990), 1.0 - np.finfo(float).eps * np.arange(1, 11)])
    cell = planets.choose_cells(layout, star, u)
    assert (occ.envelope.ravel()[cell] > 0).all()
    assert (cell // occ.n_cells == stars.spectral_class[star]).all()
    # multinomial frequencies of the cells of class G (chi-square test, scipy)
    g = cell[cell // occ.n_cells == 1] - occ.n_cells
    positive = occ.envelope[1] > 0
    observed = np.bincount(g, minlength=occ.n_cells)[positive]
    expected = len(g) * occ.envelope[1][positive] / occ.envelope[1].sum()
    assert scipy.stats.chisquare(observed, expected).pvalue > 1e-3


# -- determinism and common random numbers ---------------------------------------------------------
HYPER = {"dist": "uniform", "loc": {"dist": "uniform", "loc": 0.1, "scale": 0.2}, "scale": 0.3}


def _priors():
    return planets.PriorsSection(bond_albedo=HYPER, eccentricity={"dist": "beta", "a": 0.867, "b": 3.03})


def _concat(parts, offsets):
    return {name: np.concatenate([getattr(p, name) + (o if name == "row" else 0) for p, o in zip(parts, offsets)])
            for name in FIELDS}


def test_rows_do_not_depend_on_block_size():
    occ = model(kind="power-law", preset="sag13", spread=2.0)
    stars = sun_like(150)
    stars.spectral_class[:] = np.arange(150) % 4
    rng = np.random.default_rng(5)
    factors = {"occurrence.rates": rng.random(64), "planets.bond_albedo.loc": 0.1 + 0.2 * rng.random(64)}
    factors["occurrence.rates"][[3, 40]] = 0.9995  # above the envelope: the excess stream too
    priors = _priors()
    results = []
    for size in (1, 7, 64):
        parts, offsets = [], []
        for start in range(0, 64, size):
            block = make_block(factors, start=start, stop=min(start + size, 64))
            parts.append(planets.draw_planets(block, stars, occ, resolve(priors, block)))
            offsets.append(start)
        results.append(_concat(parts, offsets))
    assert len(results[0]["row"]) > 1000 and (results[0]["eccentricity"] > 0).any()
    for other in results[1:]:
        for name in FIELDS:
            assert np.array_equal(results[0][name], other[name]), name


def test_population_source_and_seed_change_the_planets():
    occ = model(kind="power-law", preset="sag13")
    stars, q = sun_like(100), {"occurrence.rates": np.full(4, 0.5)}
    a = draw(occ, stars, q)
    assert not np.array_equal(a.radius_rearth, draw(occ, stars, q, source=1).radius_rearth)
    assert not np.array_equal(a.radius_rearth, draw(occ, stars, q, seed=7).radius_rearth)
    np.testing.assert_array_equal(a.radius_rearth, draw(occ, stars, q).radius_rearth)


def _identical_share(old, new):
    columns = np.column_stack([getattr(old, name).astype(float) for name in FIELDS])
    newer = {row.tobytes() for row in np.column_stack([getattr(new, name).astype(float) for name in FIELDS])}
    return np.mean([row.tobytes() in newer for row in columns])


@pytest.mark.parametrize("uncertainty", ["shared", "independent"])
def test_raising_a_rate_by_one_percent_keeps_the_planets(uncertainty):
    occ = model(kind="power-law", preset="sag13", uncertainty=uncertainty, cells_per_efold=1)
    stars = sun_like(300)
    names = [f.name for f in occ.factors()]
    base = {name: np.full(8, 0.5) for name in names}
    raised = {name: v.copy() for name, v in base.items()}
    raised[names[0]] *= 1.01
    old, new = draw(occ, stars, base), draw(occ, stars, raised)
    assert occ.cell_rates(raised, 8).sum() > occ.cell_rates(base, 8).sum()
    assert len(new) >= len(old) and _identical_share(old, new) >= 0.98
    assert _identical_share(old, new) == 1.0  # thinning: a higher rate only adds planets


def test_changing_an_albedo_hyperparameter_moves_only_albedos():
    occ = model(kind="power-law", preset="sag13")
    stars, priors = sun_like(200), _priors()
    low = {"occurrence.rates": np.full(6, 0.5), "planets.bond_albedo.loc": np.full(6, 0.15)}
    high = {"occurrence.rates": np.full(6, 0.5), "planets.bond_albedo.loc": np.full(6, 0.25)}
    a, b = draw(occ, stars, low, priors=priors), draw(occ, stars, high, priors=priors)
    for name in ORBIT_FIELDS:
        assert np.array_equal(getattr(a, name), getattr(b, name)), name
    # uniform(loc, scale).ppf(u) = loc + u scale: the shift of loc, planet by planet (analytic)
    np.testing.assert_allclose(b.bond_albedo - a.bond_albedo, 0.10, rtol=1e-9)
    assert (b.teq_K < a.teq_K).all()


def test_shared_quantile_half_draws_the_nominal_rates():
    occ = model(kind="power-law", preset="sag13")
    np.testing.assert_allclose(occ.cell_rates({"occurrence.rates": np.array([0.5])})[0], occ.nominal)
    ratio = occ.cell_rates({"occurrence.rates": np.array([ndtr(1.0)])})[0] / occ.nominal
    np.testing.assert_allclose(ratio[occ.valid], 2.0, rtol=1e-9)  # default spread = 2


# -- priors schema ------------------------------------------------------------------------------
def test_hyperparameters_are_factors_of_the_spec():
    sites = params.collect(_priors(), "planets")
    factors = [s.path for s in sites if s.is_factor]
    assert factors == ["planets.bond_albedo.loc"]


@pytest.mark.parametrize("bad, words", [
    ({"bond_albedo": {"dist": "gaussian", "loc": 0.3}}, "not a continuous distribution"),
    ({"bond_albedo": {"dist": "uniform", "loc": "low"}}, "argument 'loc'"),
    ({"bond_albedo": {"dist": "norm", "loc": 0.3, "scale": 0.1}}, "must be within [0, 1]"),
    ({"bond_albedo": {"dist": "uniform", "loc": 0.1, "scale": {"dist": "uniform", "loc": -0.2, "scale": 0.4}}},
     "not a valid distribution"),
    ({"eccentricity": {"dist": "uniform", "loc": 0.5, "scale": 1.0}}, "must be within [0, 1]"),
    ({"geometric_albedo": "lamberts"}, "lambert"),
    ({"redistribution": "nightside"}, "dayside"),
    ({"bond": {"dist": "uniform"}}, "Extra inputs"),
])
def test_priors_rejected(bad, words):
    with pytest.raises(ValidationError) as info:
        planets.PriorsSection(**bad)
    assert words in str(info.value)


def test_log1p_matches_numpy():
    # ln(1 + y) by Goldberg's ratio (Goldberg 1991, ACM Computing Surveys 23, 5, Theorem 4) against
    # numpy.log1p (reference library), down to |y| below the rounding of 1 + y
    y = np.concatenate([np.linspace(-0.999, 20.0, 20001), np.geomspace(1e-25, 1e-2, 500),
                        -np.geomspace(1e-25, 1e-2, 500), [0.0]])
    np.testing.assert_allclose(planets._log1p(y.copy()), np.log1p(y), rtol=2e-15, atol=0)


def test_cell_choice_by_table_equals_numpy_searchsorted():
    section = occurrence.PowerLawSection(kind="power-law", radius_rearth=(0.5, 16.0), cells_per_efold=2, pieces=[
        {"radius_max_rearth": 2.0, "gamma": 0.4, "alpha": -0.2, "beta": 0.3},
        {"radius_max_rearth": 4.0, "gamma": 0.0, "alpha": 0.0, "beta": 0.0},
        {"gamma": 0.7, "alpha": -1.2, "beta": 0.6}], classes={"F": {"scale": 0.0}})
    occ = occurrence.build_power_law(section)
    n = 400
    stars = StarTable(name=np.array([f"s{i}" for i in range(n)]), distance_pc=np.full(n, 10.0),
                      teff_K=np.full(n, 5772.0), radius_rsun=np.ones(n), mass_msun=np.ones(n),
                      luminosity_lsun=np.ones(n), spectral_class=(np.arange(n) % 3 + 1).astype(np.int8),
                      ecliptic_latitude_deg=np.full(n, np.nan))
    layout = planets._Layout(stars, occ)
    rng = np.random.default_rng(13)
    star = rng.integers(0, n, 200000)
    u = np.concatenate([rng.random(199980), 1.0 - np.finfo(float).eps * np.arange(1, 11), np.zeros(10)])
    target = layout.star_start[star] + u * layout.star_total[star]
    slow = np.minimum(np.searchsorted(layout.cumulative, target, side="right"), layout.star_last[star])  # numpy
    assert np.array_equal(planets.choose_cells(layout, star, u), slow)


@pytest.mark.parametrize("workflow, n_runs, runs_max", [("demo.toml", 1, 4), ("binned_rates.toml", 80, 4),
                                                       ("binned_rates.toml", 80, 100)])
def test_candidate_counts_are_numpys_poisson_of_the_star_envelope(workflow, n_runs, runs_max, monkeypatch):
    # Reference: numpy's Generator.poisson with the per-star means as one array (what the
    # equal-envelope runs must reproduce number for number and leave the stream where it would).
    from sweep.spec import load_spec

    model = load_spec(Path(__file__).resolve().parents[1] / "workflows" / workflow).build_model()
    layout = planets._layout(model.stars, model.occurrence)
    assert len(layout.envelope_runs) == n_runs  # produced by this code
    monkeypatch.setattr(planets, "_ENVELOPE_RUNS_MAX", runs_max)  # 100: one call per run
    ours, reference = np.random.default_rng(11), np.random.default_rng(11)
    for _ in range(3):
        np.testing.assert_array_equal(layout.candidate_counts(ours), reference.poisson(layout.star_envelope))
    assert ours.bit_generator.state == reference.bit_generator.state
