"""Drawing the planets of every star for a block of rows, with common random numbers.

The draw follows DESIGN.md ("Rows, seeds and common random numbers"). For each row of a block:

1. candidates: every star gets ``Poisson(envelope total of its class)`` candidates from the row's
   :data:`~sweep.streams.CANDIDATES` stream, where the envelope (:attr:`OccurrenceModel.envelope`)
   is fixed by the spec and never depends on factor values;
2. each candidate gets all its uniforms at once, one ``rng.random((N_UNIFORMS, n))`` call, in the
   order of :data:`UNIFORMS` (cell, acceptance, ln R, ln P, cos i, mean anomaly, argument of
   periapsis, Bond albedo, geometric albedo, eccentricity);
3. thinning (Lewis & Shedler 1979): a candidate in cell ``k`` is kept when its acceptance uniform
   is below ``rate_k / envelope_k``; where a row's rate exceeds the envelope, the excess planets
   come from the row's :data:`~sweep.streams.EXCESS` stream (Poisson per cell, hosts uniform among
   the stars of the class), so the planets of a star are exactly ``Poisson(rate)`` per cell. Only
   candidates whose acceptance uniform is below the row's largest ratio are given a cell (the
   others are rejected whatever their cell), and these are handled for the whole block at once;
4. every property comes from its own uniform through an inverse CDF: ln R and ln P within the cell
   (density ``∝ R^alpha P^beta``), ``cos i`` uniform on [-1, 1] (isotropic orbits), mean anomaly
   and argument of periapsis uniform on [0, 2 pi), albedos and eccentricity by ``prior.ppf(u)``.

So a row's planets depend only on (sweep seed, base index, population source) and the row's
factor values; raising a rate keeps every planet drawn before and adds a few; changing an albedo
hyperparameter moves albedos smoothly and leaves every radius, period and orbit as it was.
Derived quantities (semi-major axis, equilibrium temperature, mass, RV semi-amplitude, sky
geometry) come from :mod:`sweep.physics` for all planets of the block at once.

Equilibrium temperature and insolation are orbit averages: the mean flux of an eccentric orbit is
``L / (4 pi a^2 sqrt(1 - e^2))`` [2]_.

References
----------
.. [1] Lewis, P. A. W. & Shedler, G. S. 1979, "Simulation of nonhomogeneous Poisson processes by
   thinning", Naval Research Logistics Quarterly 26, 403; doi:10.1002/nav.3800260304 (from memory)
.. [2] Williams, D. M. & Pollard, D. 2002, "Earth-like worlds on eccentric orbits", International
   Journal of Astrobiology 1, 61; doi:10.1017/S1473550402001064 (from memory)
"""

from __future__ import annotations

import itertools
import math
from typing import Literal

# scipy.stats is imported where used (validation, non-uniform priors): worker processes import
# this module and may never need it.
import numpy as np
from pydantic import BaseModel, ConfigDict, Field, TypeAdapter, model_validator

from sweep import params, streams
from sweep.blocks import RowBlock
from sweep.occurrence import OccurrenceModel
from sweep.physics import habitability, masses, orbits, radiation
from sweep.structs import PlanetBatch, StarTable

#: Per-candidate uniforms, in the order of the rows of the array drawn for each row.
UNIFORMS = ("cell", "accept", "ln_radius", "ln_period", "cos_inclination", "mean_anomaly",
            "arg_periapsis", "bond_albedo", "geometric_albedo", "eccentricity")
N_UNIFORMS = len(UNIFORMS)
(_CELL, _ACCEPT, _LNR, _LNP, _COSI, _MEAN_ANOMALY, _PERIAPSIS, _BOND, _GEOMETRIC,
 _ECC) = range(N_UNIFORMS)
#: Rows of the uniforms that become planet properties (all but the cell and acceptance uniforms).
_PROPERTIES = slice(_LNR, N_UNIFORMS)

_PARAM = TypeAdapter(params.Param)
_TWO_PI = 2.0 * np.pi


class Prior(BaseModel):
    """A planet-level prior: a continuous ``scipy.stats`` distribution and its keyword arguments.

    ``dist`` names the distribution; every other key is one of its arguments (``loc``, ``scale``,
    shape parameters), written as a spec parameter: a number, a grid, or itself uncertain (a
    hyperprior, for instance ``loc = { dist = "uniform", loc = 0.1, scale = 0.2 }``).
    """

    model_config = ConfigDict(extra="allow")

    dist: str = Field(description="Name of a continuous distribution in scipy.stats.")

    @model_validator(mode="after")
    def _arguments_are_params(self):
        import scipy.stats

        family = getattr(scipy.stats, self.dist, None)
        if not isinstance(family, scipy.stats.rv_continuous):
            raise ValueError(f"dist = {self.dist!r} is not a continuous distribution of scipy.stats "
                             "(for example 'uniform', 'beta', 'truncnorm', 'lognorm')")
        extra = self.__pydantic_extra__ or {}
        for key, value in list(extra.items()):
            try:
                extra[key] = _PARAM.validate_python(value)
            except Exception as exc:
                raise ValueError(f"argument {key!r} of dist {self.dist!r}: {exc}".splitlines()[0]) from None
        self.support_range()  # scipy.stats accepts the arguments over their whole range
        return self

    def arguments(self) -> dict:
        """The distribution's keyword arguments (numbers, grids, uncertain parameters or arrays)."""
        return dict(self.__pydantic_extra__ or {})

    def _corners(self):
        ranges = {}
        for key, value in self.arguments().items():
            low, high = params.bounds(value)
            if isinstance(value, params.Uncertain) and not (math.isfinite(low) and math.isfinite(high)):
                low, high = (float(v) for v in value.frozen().ppf([1e-9, 1.0 - 1e-9]))
            ranges[key] = sorted({low, high})
        keys = list(ranges)
        for combo in itertools.product(*(ranges[k] for k in keys)):
            yield dict(zip(keys, combo))

    def support_range(self) -> tuple[float, float]:
        """Smallest and largest value the prior can give, over every hyperparameter's range.

        Checks that ``scipy.stats`` accepts the arguments at each corner of the hyperparameters'
        ranges (bounds of grids and distributions; the 1e-9 quantiles of unbounded ones).
        """
        import scipy.stats

        family = getattr(scipy.stats, self.dist)
        low, high = np.inf, -np.inf
        for arguments in self._corners():
            try:
                median = float(family.ppf(0.5, **arguments))
                a, b = (float(v) for v in family.support(**arguments))
            except TypeError as exc:
                raise ValueError(f"scipy.stats.{self.dist} rejects the arguments {arguments}: {exc}") from None
            if not math.isfinite(median):
                raise ValueError(f"scipy.stats.{self.dist} is not a valid distribution with {arguments} "
                                 "(check the parameter ranges in the scipy.stats documentation)")
            low, high = min(low, a), max(high, b)
        return low, high

    def ppf(self, quantile: np.ndarray, row: np.ndarray) -> np.ndarray:
        """Inverse CDF at ``quantile``, with per-row hyperparameters indexed by ``row``.

        Parameters
        ----------
        quantile : ndarray
            Uniforms in [0, 1), one per planet.
        row : ndarray of int
            Row (within the block) of each planet; selects the arguments that are per-row arrays.
        """
        arguments = {}
        for key, value in self.arguments().items():
            value = np.asarray(value, dtype=float)
            arguments[key] = np.take(value, row) if value.ndim else float(value)
        if self.dist == "uniform":  # scipy's own formula, q * scale + loc, without its argument checks
            out = np.multiply(quantile, arguments.get("scale", 1.0))
            out += arguments.get("loc", 0.0)
            return out
        import scipy.stats

        return getattr(scipy.stats, self.dist).ppf(quantile, **arguments)


def _default_bond_albedo() -> Prior:
    return Prior(dist="uniform", loc=0.1, scale=0.5)


class PriorsSection(BaseModel):
    """Planet-level priors (``[planets]`` of a spec).

    The default Bond albedo is uniform on [0.1, 0.6], a broad choice of ours spanning rocky and
    cloudy planets (Earth's Bond albedo is about 0.3; from memory). The geometric albedo follows
    the Bond albedo through the Lambert phase integral (``p = 2 A_B / 3``) unless given its own
    prior. Orbits are circular unless an eccentricity prior is given (Kipping 2013, MNRAS 434, L51,
    suggests ``dist = "beta", a = 0.867, b = 3.03``; from memory).
    """

    model_config = ConfigDict(extra="forbid")

    bond_albedo: Prior = Field(default_factory=_default_bond_albedo, description="Prior of the Bond albedo [1].")
    geometric_albedo: Prior | Literal["lambert"] = Field(
        default="lambert", description="Prior of the geometric albedo [1], or 'lambert': p = 2 A_B / 3.")
    eccentricity: Prior | None = Field(default=None, description="Prior of the eccentricity [1]; none: circular.")
    redistribution: Literal["full", "dayside"] = Field(
        default="full", description="Heat redistribution for the equilibrium temperature.")

    @model_validator(mode="after")
    def _supports(self):
        checks = [("bond_albedo", self.bond_albedo, 0.0, 1.0, "within [0, 1]")]
        if isinstance(self.geometric_albedo, Prior):
            checks.append(("geometric_albedo", self.geometric_albedo, 0.0, np.inf, ">= 0"))
        if self.eccentricity is not None:
            checks.append(("eccentricity", self.eccentricity, 0.0, 1.0, "within [0, 1]"))
        for name, prior, low, high, what in checks:
            a, b = prior.support_range()
            if a < low or b > high:
                raise ValueError(f"{name}: the support of scipy.stats.{prior.dist} reaches "
                                 f"[{a:g}, {b:g}]; it must be {what}")
        return self


def _log1p(y: np.ndarray) -> np.ndarray:
    """``ln(1 + y)`` for y > -1, as ``ln(w) y / (w - 1)`` with ``w = 1 + y`` (``y`` where w = 1).

    Accurate to a few units in the last place like ``np.log1p`` (the rounding of ``w`` cancels
    in the ratio), at half its cost: ``np.log`` is vectorised, ``np.log1p`` is not.

    References
    ----------
    .. [1] Goldberg, D. 1991, "What every computer scientist should know about floating-point
       arithmetic", ACM Computing Surveys 23, 5, Theorem 4; doi:10.1145/103162.103163 (from memory).
    """
    w = y + 1.0
    ratio = np.subtract(w, 1.0)
    exact = np.flatnonzero(ratio == 0.0)  # |y| below half an ulp of 1: ln(1 + y) = y to rounding
    ratio[exact] = 1.0
    np.divide(y, ratio, out=ratio)
    x = np.log(w, out=w)
    x *= ratio
    x[exact] = y[exact]
    return x


class _WithinCell:
    """Inverse CDF of the density ``∝ exp(exponent x)`` on each cell's [low, high] (x = ln R or ln P).

    ``x = low + ln(1 + u (exp(exponent w) - 1)) / exponent`` with ``w = high - low``, and
    ``x = low + u w`` for exponent 0; the per-cell constants are computed once.
    """

    def __init__(self, exponent, low, high):
        exponent, low, high = (np.asarray(v, float).ravel() for v in (exponent, low, high))
        width = high - low
        self.flat = exponent == 0.0
        self.any_flat, self.all_flat = bool(self.flat.any()), bool(self.flat.all())
        safe = np.where(self.flat, 1.0, exponent)
        self.low = low
        self.scale = np.where(self.flat, width, np.expm1(safe * width))
        self.inverse = 1.0 / safe

    def __call__(self, u, cell):
        scaled = np.take(self.scale, cell)
        scaled *= u
        if not self.any_flat:  # power laws: every cell has an exponent
            x = _log1p(scaled)
            x *= np.take(self.inverse, cell)
        elif self.all_flat:  # binned tables: log-uniform in every cell
            x = scaled
        else:
            x = np.where(self.flat[cell], scaled, np.log1p(scaled) * self.inverse[cell])
        x += np.take(self.low, cell)
        return x


class _Layout:
    """Per-model, per-star-list arrays that every row of the draw reuses."""

    def __init__(self, stars: StarTable, occurrence: OccurrenceModel):
        n_classes, n_cells = occurrence.n_classes, occurrence.n_cells
        self.n_cells = n_cells
        self.star_class = np.asarray(stars.spectral_class, dtype=np.intp)
        self.envelope = occurrence.envelope.ravel()
        class_total = occurrence.envelope.sum(axis=1)
        self.star_envelope = class_total[self.star_class]
        self.cumulative = np.cumsum(self.envelope)
        first_cell = np.arange(n_classes) * n_cells
        starts = np.concatenate([[0.0], self.cumulative])[first_cell]
        positive = occurrence.envelope > 0
        last = first_cell + np.where(positive.any(axis=1), n_cells - 1 - np.argmax(positive[:, ::-1], axis=1), 0)
        self.star_start = starts[self.star_class]
        self.star_total = class_total[self.star_class]
        self.star_last = last[self.star_class]
        self.class_count = np.bincount(self.star_class, minlength=n_classes)
        self.by_class = np.argsort(self.star_class, kind="stable")
        self.class_offset = np.concatenate([[0], np.cumsum(self.class_count)[:-1]])
        # a table for choose_cells: for bin j of a uniform grid over [0, total), the first cell
        # whose end is above the bin's lower edge (searchsorted at the edge)
        total = float(self.cumulative[-1]) if len(self.cumulative) else 0.0
        n_bins = 8 * len(self.cumulative)
        self.bins_per_unit = n_bins / total if total > 0 else 0.0
        edges = np.arange(n_bins) / self.bins_per_unit if total > 0 else np.zeros(1)
        self.bin_first_cell = np.searchsorted(self.cumulative, edges, side="right")
        self.cumulative_ends = np.append(self.cumulative, np.inf)
        self.positive = self.envelope > 0
        self.ln_radius = _WithinCell(occurrence.alpha, occurrence.lnr_lo, occurrence.lnr_hi)
        self.ln_period = _WithinCell(occurrence.beta, occurrence.lnp_lo, occurrence.lnp_hi)
        self.star_ids = np.arange(len(stars), dtype=np.int64)
        # runs of stars with the same envelope (one run when the rates do not depend on the
        # spectral class): Generator.poisson(lam, size) draws the same numbers as with an array
        # of equal lam, without checking the array on every call
        change = np.flatnonzero(np.diff(self.star_envelope)) + 1
        bounds = np.concatenate([[0], change, [len(stars)]]).astype(int).tolist()
        self.envelope_runs = [(float(self.star_envelope[a]), b - a) for a, b in zip(bounds[:-1], bounds[1:]) if b > a]

    def candidate_counts(self, rng: np.random.Generator) -> np.ndarray:
        """Candidates of every star for one row: Poisson with mean :attr:`star_envelope`."""
        if len(self.envelope_runs) == 1:
            lam, size = self.envelope_runs[0]
            return rng.poisson(lam, size)
        if not self.envelope_runs or len(self.envelope_runs) > _ENVELOPE_RUNS_MAX:
            return rng.poisson(self.star_envelope)
        return np.concatenate([rng.poisson(lam, size) for lam, size in self.envelope_runs])


#: Above this many runs of equal envelope, one array call is cheaper than a call per run.
_ENVELOPE_RUNS_MAX = 4

#: Layouts of recent (star list, occurrence model) pairs, by identity: a worker draws many blocks
#: with the same model objects. Holds the objects themselves, so that an id is never reused.
_LAYOUTS: dict[tuple[int, int], tuple[StarTable, OccurrenceModel, _Layout]] = {}
_LAYOUTS_KEPT = 4


def _layout(stars: StarTable, occurrence: OccurrenceModel) -> _Layout:
    """The :class:`_Layout` of a star list and occurrence model, made once per pair of objects."""
    key = (id(stars), id(occurrence))
    cached = _LAYOUTS.get(key)
    if cached is not None and cached[0] is stars and cached[1] is occurrence:
        return cached[2]
    layout = _Layout(stars, occurrence)
    while len(_LAYOUTS) >= _LAYOUTS_KEPT:  # forget the oldest
        _LAYOUTS.pop(next(iter(_LAYOUTS), None), None)
    _LAYOUTS[key] = (stars, occurrence, layout)
    return layout


def choose_cells(layout: _Layout, star: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Cell of each candidate: the inverse CDF of its host's class envelope at ``u``.

    Parameters
    ----------
    layout : _Layout
        Envelope arrays of the model and star list.
    star : ndarray of int
        Host star of each candidate.
    u : ndarray
        The candidates' cell uniforms in [0, 1).

    Returns
    -------
    ndarray of int
        Flat cell index (``class * n_cells + cell``); never a cell of zero envelope.
    """
    target = np.take(layout.star_total, star)
    target *= u
    target += np.take(layout.star_start, star)  # star_start + u * star_total
    # np.searchsorted(layout.cumulative, target, side="right"), by table: start from the first
    # cell of the bin below the target's (never past the answer, whatever the rounding of the
    # bin index) and step on while the cell ends at or below the target (this also skips cells of
    # zero width). The cap only catches rounding at the class's top end.
    bins = np.multiply(target, layout.bins_per_unit, out=np.empty(len(target), np.intp), casting="unsafe")
    bins -= 1
    cell = np.take(layout.bin_first_cell, bins, mode="clip")  # bins clipped to the table
    behind = np.flatnonzero(np.take(layout.cumulative_ends, cell) <= target)
    while len(behind):
        cell[behind] += 1
        behind = behind[layout.cumulative_ends[cell[behind]] <= target[behind]]
    return np.minimum(cell, np.take(layout.star_last, star), out=cell)


def _excess_cells(layout: _Layout, excess: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Cell of each planet of one row above the envelope: Poisson per cell (the stream's first draw)."""
    per_cell = rng.poisson(excess * np.repeat(layout.class_count, layout.n_cells))
    return np.repeat(np.arange(len(per_cell)), per_cell)


def _excess_hosts(layout: _Layout, cell: np.ndarray, u_cell: np.ndarray) -> np.ndarray:
    """Host of each planet above the envelope: uniform among the stars of its cell's class."""
    klass = cell // layout.n_cells
    pick = np.minimum((u_cell * layout.class_count[klass]).astype(np.intp), layout.class_count[klass] - 1)
    return layout.by_class[layout.class_offset[klass] + pick]


def draw_planets(block: RowBlock, stars: StarTable, occurrence: OccurrenceModel,
                 priors_resolved: PriorsSection) -> PlanetBatch:
    """Every planet of every star for each row of a block, as one struct of arrays.

    Parameters
    ----------
    block : RowBlock
        The rows: seed, base indices, population sources and factor values (the occurrence
        factors among them).
    stars : StarTable
        The star list.
    occurrence : OccurrenceModel
        The occurrence model.
    priors_resolved : PriorsSection
        Planet priors whose hyperparameters are numbers or arrays of shape ``(len(block),)``
        (:func:`sweep.params.resolve` with the block's factor values).

    Returns
    -------
    PlanetBatch
        One entry per planet, ordered by row, with the row (within the block) and the star index.
    """
    layout = _layout(stars, occurrence)
    n_rows, n_stars = len(block), len(stars)
    rates = occurrence.cell_rates(block.factors, n_rows).reshape(n_rows, -1)
    has_excess = (rates > layout.envelope).any(axis=1)  # rows with rates above the envelope
    ratio = np.divide(rates, layout.envelope, out=np.zeros_like(rates), where=layout.positive)
    # a candidate whose acceptance uniform is above its row's largest ratio is rejected whatever
    # its cell: only the others are kept for the block-wide pass below (all of the kept ones, and
    # only them, when the rates move together)
    row_max = ratio.max(axis=1, initial=0.0).tolist()
    # and one below its row's smallest ratio (over cells of nonzero envelope, the only cells a
    # candidate gets) is kept whatever its cell
    row_min = ratio.min(axis=1, initial=np.inf, where=layout.positive)
    # first pass: one generator per row, keyed by what the row is, and its Poisson draws (each
    # stream's first draw), which bound the number of planets of the block
    generators = streams.row_generators(block.seed, block.base_index, block.population_source,
                                        streams.CANDIDATES)
    counts = [layout.candidate_counts(rng) for rng in generators]
    extra = {}
    if has_excess.any():
        excess_rows = np.flatnonzero(has_excess)
        x_generators = streams.row_generators(block.seed, np.asarray(block.base_index)[excess_rows],
                                              np.asarray(block.population_source)[excess_rows], streams.EXCESS)
        for r, x_rng in zip(excess_rows.tolist(), x_generators):
            excess = np.maximum(rates[r] - layout.envelope, 0.0)
            extra[r] = (x_rng, _excess_cells(layout, excess, x_rng))
    counts = np.concatenate(counts + [np.zeros(0, np.int64)])  # by (row, star)
    sizes = counts.reshape(n_rows, n_stars).sum(axis=1) if n_rows and n_stars else np.zeros(n_rows, np.int64)
    first = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64).tolist()  # first candidate of each row
    n_extra = [len(x[1]) for x in extra.values()]
    # second pass: each row's uniforms, one (N_UNIFORMS, n) draw into a scratch buffer that stays
    # in cache; the candidates that may be kept, then the row's excess planets, are copied into
    # the columns of ``u``, in the order of the batch (by row)
    scratch = np.empty(N_UNIFORMS * max([int(sizes.max(initial=0))] + n_extra))
    u = np.empty((N_UNIFORMS, first[-1] + sum(n_extra)))
    maybe = np.empty(first[-1], bool)  # of every candidate
    per_row = [0] * n_rows  # columns of each row
    extra_columns, extra_stars, extra_cells = [], [], []
    end = 0
    for r, rng in enumerate(generators):
        n, row_start = first[r + 1] - first[r], end
        uniforms = scratch[:N_UNIFORMS * n].reshape(N_UNIFORMS, n)
        rng.random(out=uniforms)
        row_maybe = np.less(uniforms[_ACCEPT], row_max[r], out=maybe[first[r]:first[r + 1]])
        # compress, then copy: compress(out=) into the non-contiguous columns goes through a
        # temporary anyway, and more slowly
        kept_uniforms = uniforms.compress(row_maybe, axis=1)
        start, end = end, end + kept_uniforms.shape[1]
        u[:, start:end] = kept_uniforms
        if r in extra:
            x_rng, x_cells = extra[r]
            start, end = end, end + len(x_cells)
            x_uniforms = scratch[:N_UNIFORMS * len(x_cells)].reshape(N_UNIFORMS, len(x_cells))
            x_rng.random(out=x_uniforms)
            u[:, start:end] = x_uniforms
            extra_columns.append(np.arange(start, end))
            extra_stars.append(_excess_hosts(layout, x_cells, x_uniforms[_CELL]))
            extra_cells.append(x_cells)
        per_row[r] = end - row_start
    u = u[:, :end]
    row = np.repeat(np.arange(n_rows, dtype=np.int64), per_row)
    # host of every candidate left: the star of its place in the block's (row, star) counts
    star = np.repeat(np.tile(layout.star_ids, n_rows), counts).compress(maybe)
    if extra:
        extra_columns = np.concatenate(extra_columns)
        is_candidate = np.ones(end, bool)
        is_candidate[extra_columns] = False
        star_all = np.empty(end, np.int64)
        star_all[is_candidate] = star
        star_all[extra_columns] = np.concatenate(extra_stars)
        star = star_all
    # cells and thinning of the candidates (done for every column: the excess planets' results
    # are then replaced by their own cells, and they are all kept)
    cell = choose_cells(layout, star, u[_CELL])
    kept = u[_ACCEPT] < np.repeat(row_min, per_row)
    unsure = np.flatnonzero(~kept)  # the few that need their cell's own ratio
    kept[unsure] = u[_ACCEPT, unsure] < ratio[row[unsure], cell[unsure]]
    if extra:
        cell[extra_columns] = np.concatenate(extra_cells)
        kept[extra_columns] = True
    u = u[_PROPERTIES]
    if not kept.all():
        row, star, cell, u = row.compress(kept), star.compress(kept), cell.compress(kept), u.compress(kept, axis=1)
    return _properties(row, star, cell, u, stars, layout, priors_resolved)


def _properties(row, star, cell, u, stars: StarTable, layout: _Layout, priors: PriorsSection) -> PlanetBatch:
    """All planet properties from the uniforms (the rows :data:`_PROPERTIES`) and the physics module."""
    u_lnr, u_lnp, u_cosi, u_mean_anomaly, u_periapsis, u_bond, u_geometric, u_ecc = u
    lnr = layout.ln_radius(u_lnr, cell)
    lnp = layout.ln_period(u_lnp, cell)
    radius, period = np.exp(lnr), np.exp(lnp, out=lnp)
    cos_i = np.multiply(u_cosi, -2.0)
    cos_i += 1.0
    sin_i = np.subtract(1.0, cos_i)  # sin(arccos c) = sqrt((1 - c) (1 + c)) >= 0, accurate near c = +-1
    sin_i *= 1.0 + cos_i
    np.sqrt(sin_i, out=sin_i)
    inclination = np.arccos(cos_i)
    mean_anomaly = _TWO_PI * u_mean_anomaly
    periapsis = _TWO_PI * u_periapsis
    bond = priors.bond_albedo.ppf(u_bond, row)
    if isinstance(priors.geometric_albedo, Prior):
        geometric = priors.geometric_albedo.ppf(u_geometric, row)
    else:
        geometric = radiation.geometric_albedo_lambert(bond)
    circular = priors.eccentricity is None
    eccentricity = np.zeros(len(row)) if circular else priors.eccentricity.ppf(u_ecc, row)
    star_mass = np.take(stars.mass_msun, star)
    mass = masses.chen_kipping2017_mass_mearth(radius, ln_radius=lnr)
    sma = orbits.semi_major_axis_au(period, star_mass, mass)
    separation, distance, phase = orbits.sky_geometry(sma, eccentricity, inclination, periapsis, mean_anomaly,
                                                       cos_inclination=cos_i, sin_inclination=sin_i)
    insolation = habitability.insolation_searth(np.take(stars.luminosity_lsun, star), sma)
    if circular:  # the factors below are exactly 1
        teq_distance = sma
    else:
        # orbit-averaged flux of an eccentric orbit, L / (4 pi a^2 sqrt(1 - e^2)) (Williams & Pollard 2002):
        # T_eq and insolation are orbit averages, T_eq at the distance a (1 - e^2)^(1/4) of equal mean flux
        flux_factor = np.sqrt(1.0 - eccentricity * eccentricity)
        insolation = insolation / flux_factor
        teq_distance = sma * np.sqrt(flux_factor)
    teq = radiation.equilibrium_temperature_K(np.take(stars.teff_K, star), np.take(stars.radius_rsun, star),
                                              teq_distance, bond,
                                              priors.redistribution)
    rv = masses.rv_semi_amplitude_from_orbit_ms(mass, star_mass, period, sma, sin_i, eccentricity)
    return PlanetBatch(
        row=row, star=star, radius_rearth=radius, period_d=period, semi_major_axis_au=sma,
        eccentricity=eccentricity, inclination_rad=inclination, arg_periapsis_rad=periapsis,
        mean_anomaly_rad=mean_anomaly, bond_albedo=np.asarray(bond, float),
        geometric_albedo=np.asarray(geometric, float), teq_K=np.asarray(teq, float),
        insolation_searth=np.asarray(insolation, float), mass_mearth=np.asarray(mass, float),
        rv_semi_amplitude_ms=np.asarray(rv, float), separation_au=np.asarray(separation, float),
        orbital_distance_au=np.asarray(distance, float), phase_angle_rad=np.asarray(phase, float),
    )
