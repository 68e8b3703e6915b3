"""The planet-yield model written the obvious way, for the ``reference_speedup`` benchmark.

A Python loop over rows, stars and planets: each star gets ``Poisson(total rate of its class)``
planets, each planet its cell by inverse CDF of the cell rates (:func:`bisect.bisect_right`), its
radius and period by inverse CDF within the cell, its orbit and albedos from one uniform each, and
every derived quantity from :mod:`sweep.physics` called on scalars. Each planet is then shown, as a
one-planet :class:`~sweep.structs.PlanetBatch`, to every concept at every grid point, and counted
with the tally's category index. No thinning, no envelope, no arrays of planets: the same model in
law, drawn from a separate random stream, so the benchmark can only compare the two statistically
(:func:`agreement`).
"""

from __future__ import annotations

import bisect
import itertools
import math

import numpy as np
import scipy.stats

from sweep import params
from sweep.blocks import RowBlock
from sweep.planets import Prior
from sweep.physics import habitability, masses, orbits, radiation
from sweep.structs import PlanetBatch

#: First entry of the reference's seed key, so its numbers never coincide with the model's streams.
REFERENCE_KEY = 0x5EED


def _row_values(block: RowBlock, r: int, point: dict):
    """Value source of :func:`sweep.params.resolve` for row ``r`` alone (factor arrays of length 1)."""

    def value_of(path, param):
        if isinstance(param, params.Uncertain):
            return np.asarray(block.factors[path][r:r + 1], np.float64)
        return float(point[path])

    return value_of


def _scalar_ppf(prior: Prior, u: float) -> float:
    """``scipy.stats.<dist>.ppf(u)`` with the row's hyperparameters (arrays of length 1)."""
    arguments = {key: float(np.ravel(value)[0]) for key, value in prior.arguments().items()}
    return float(getattr(scipy.stats, prior.dist).ppf(u, **arguments))


def _within_cell(u: float, exponent: float, low: float, high: float) -> float:
    """Inverse CDF of the density ``exp(exponent x)`` on [low, high], on scalars."""
    if exponent == 0.0:
        return low + u * (high - low)
    return low + math.log1p(u * math.expm1(exponent * (high - low))) / exponent


def reference_counts(model, block: RowBlock) -> dict[str, np.ndarray]:
    """Counts of a block by plain loops: ``present`` (rows, categories) and ``detected`` (rows,
    grid points, channels, categories), the layout of :meth:`sweep.tally.Tally.count` flattened
    over the grid.

    Parameters
    ----------
    model : sweep.model.PlanetYieldModel
        The model (its stars, occurrence model, priors, concepts and tally).
    block : RowBlock
        The rows.
    """
    stars, occurrence, tally = model.stars, model.occurrence, model.tally
    points = list(model.grid_points())
    n_rows = len(block)
    present = np.zeros((n_rows, tally.n_categories), np.int64)
    detected = np.zeros((n_rows, len(points), tally.n_channels, tally.n_categories), np.int64)
    teff, radius_rsun = stars.teff_K.tolist(), stars.radius_rsun.tolist()
    mass_msun, lum = stars.mass_msun.tolist(), stars.luminosity_lsun.tolist()
    star_class = [int(c) for c in stars.spectral_class]
    for r in range(n_rows):
        rates = occurrence.cell_rates({k: v[r:r + 1] for k, v in block.factors.items()}, 1)[0]
        cumulative = [list(itertools.accumulate(rates[k].tolist())) for k in range(occurrence.n_classes)]
        priors = params.resolve(model.priors, "priors", _row_values(block, r, {}))
        sections = [[params.resolve(section, f"concepts.{concept.name}", _row_values(block, r, point))
                     for concept, section in zip(model.concepts, model.concept_sections)] for point in points]
        rng = np.random.default_rng([REFERENCE_KEY, int(block.seed), int(block.base_index[r]),
                                     int(block.population_source[r])])
        for s in range(len(stars)):
            k = star_class[s]
            total = cumulative[k][-1]
            for _ in range(int(rng.poisson(total)) if total > 0 else 0):
                u = rng.random(10).tolist()
                cell = min(bisect.bisect_right(cumulative[k], u[0] * total), occurrence.n_cells - 1)
                while rates[k, cell] <= 0.0:  # rounding at the top end: the last cell with a rate
                    cell -= 1
                lnr = _within_cell(u[1], occurrence.alpha[k, cell], occurrence.lnr_lo[k, cell],
                                   occurrence.lnr_hi[k, cell])
                lnp = _within_cell(u[2], occurrence.beta[k, cell], occurrence.lnp_lo[k, cell],
                                   occurrence.lnp_hi[k, cell])
                planet = _planet(s, math.exp(lnr), math.exp(lnp), u, priors, mass_msun[s], lum[s], teff[s],
                                 radius_rsun[s])
                category, valid = tally.category_index(planet, stars)
                if not valid[0]:
                    continue
                c = int(category[0])
                present[r, c] += 1
                for g, per_concept in enumerate(sections):
                    channel = 0
                    for concept, section in zip(model.concepts, per_concept):
                        for hit in concept.detect(planet, stars, section)[:, 0]:
                            detected[r, g, channel, c] += bool(hit)
                            channel += 1
    return {"present": present, "detected": detected}


def _planet(star, radius, period, u, priors, mass_msun, lum, teff, radius_rsun) -> PlanetBatch:
    """One planet from its uniforms, every property by a scalar call into :mod:`sweep.physics`."""
    inclination = math.acos(1.0 - 2.0 * u[3])
    mean_anomaly, periapsis = 2.0 * math.pi * u[4], 2.0 * math.pi * u[5]
    bond = _scalar_ppf(priors.bond_albedo, u[6])
    if isinstance(priors.geometric_albedo, Prior):
        geometric = _scalar_ppf(priors.geometric_albedo, u[7])
    else:
        geometric = float(radiation.geometric_albedo_lambert(bond))
    eccentricity = 0.0 if priors.eccentricity is None else _scalar_ppf(priors.eccentricity, u[8])
    mass = float(masses.chen_kipping2017_mass_mearth(radius))
    sma = float(orbits.semi_major_axis_au(period, mass_msun, mass))
    separation, distance, phase = orbits.sky_geometry(sma, eccentricity, inclination, periapsis, mean_anomaly)
    flux_factor = math.sqrt(1.0 - eccentricity * eccentricity)
    insolation = float(habitability.insolation_searth(lum, sma)) / flux_factor
    teq = float(radiation.equilibrium_temperature_K(teff, radius_rsun, sma * math.sqrt(flux_factor), bond,
                                                    priors.redistribution))
    rv = float(masses.rv_semi_amplitude_ms(mass, mass_msun, period, inclination, eccentricity))
    values = dict(radius_rearth=radius, period_d=period, semi_major_axis_au=sma, eccentricity=eccentricity,
                  inclination_rad=inclination, arg_periapsis_rad=periapsis, mean_anomaly_rad=mean_anomaly,
                  bond_albedo=bond, geometric_albedo=geometric, teq_K=teq, insolation_searth=insolation,
                  mass_mearth=mass, rv_semi_amplitude_ms=rv, separation_au=float(separation),
                  orbital_distance_au=float(distance), phase_angle_rad=float(phase))
    return PlanetBatch(row=np.zeros(1, np.int64), star=np.full(1, star, np.int64),
                       **{key: np.full(1, value, np.float64) for key, value in values.items()})


def totals(counts: dict[str, np.ndarray], tally) -> np.ndarray:
    """Per-row totals compared by :func:`agreement`: planets present, then detections per grid
    point and channel (summed over categories); shape (rows, 1 + grid points x channels).

    Parameters
    ----------
    counts : dict
        ``present`` and ``detected`` of :func:`reference_counts` or of ``model.evaluate``.
    tally : sweep.tally.Tally
        The model's tally (for the sizes of the grid, channel and category axes).
    """
    n_rows = len(counts["present"])
    present = counts["present"].reshape(n_rows, -1).sum(axis=1)
    detected = counts["detected"].reshape(n_rows, tally.n_grid * tally.n_channels, tally.n_categories)
    return np.column_stack([present, detected.sum(axis=-1)])


def agreement(reference: np.ndarray, model_sum: np.ndarray, replicates: int, family_alpha: float = 1e-3) -> dict:
    """Exact tests that the reference and the model count alike, one per quantity of :func:`totals`.

    Given the rows, every total is a Poisson count: planets form a Poisson process per star and
    the counts keep those that fall in a category bin and are detected, each planet on its own
    (thinning keeps a Poisson process Poisson). The reference counts ``R`` with mean ``mu`` in one
    population of the rows, the model ``M`` with mean ``k mu`` over ``k`` replicate populations, so
    ``R`` given ``R + M`` is binomial with probability ``1 / (1 + k)`` (:func:`scipy.stats.binomtest`,
    two-sided). The two agree when no test rejects at ``family_alpha`` after a Bonferroni correction
    over the quantities with any count.

    Parameters
    ----------
    reference : ndarray, shape (rows, quantities)
        Totals of the reference.
    model_sum : ndarray, shape (rows, quantities)
        Totals of the model summed over its replicate populations of the same rows.
    replicates : int
        Number of replicate populations ``k`` in ``model_sum``.
    family_alpha : float
        False-alarm probability of the whole family of tests [1].
    """
    r = np.asarray(reference, np.int64).sum(axis=0)
    m = np.asarray(model_sum, np.int64).sum(axis=0)
    p = np.array([scipy.stats.binomtest(int(a), int(a + b), 1.0 / (1 + replicates)).pvalue if a + b else 1.0
                  for a, b in zip(r, m)])
    tested = int(np.count_nonzero(r + m))
    threshold = family_alpha / max(tested, 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(m > 0, r * replicates / m, np.nan)
    return {
        "rows": int(np.shape(reference)[0]),
        "replicates": int(replicates),
        "quantities": int(len(r)),
        "tested": tested,
        "reference_planets": int(r[0]),
        "model_planets_per_replicate": float(m[0] / replicates),
        "ratio_range": [float(np.nanmin(ratio)), float(np.nanmax(ratio))] if np.isfinite(ratio).any() else None,
        "min_p": float(p.min()),
        "threshold_p": threshold,
        "agree": bool(p.min() >= threshold),
    }
