"""Occurrence-rate models and their uncertainty, as expected planets per star in cells.

Every model is turned into *cells*: rectangles in (ln R, ln P) per spectral class, each with its
expected number of planets per star (the exact integral of the rate density over the cell) and a
within-cell density ``dN / (dlnR dlnP) ∝ R^alpha P^beta`` that :mod:`sweep.planets` samples by
inverse CDF. Two kinds of model make cells:

``power-law``
    ``dN / (dlnR dlnP) = Gamma R^alpha P^beta`` (R in Earth radii, P in years), piecewise in
    radius, on a stated domain of radius and period, optionally different per spectral class. The
    preset ``"sag13"`` is the ExoPAG SAG13 parameterisation (``sweep/data/sag13_power_law.ecsv``,
    values from memory, see ``sweep/data/README.md``). The domain is cut into a fixed grid of
    ``cells_per_efold`` cells per factor e in R and in P, with the piece breaks as cell edges, so
    every cell has one power law and sampling inside it is exact.
``binned``
    A user's ECSV table of radius x period bins per class, each with a rate and asymmetric
    1-sigma errors or an upper limit (format: :func:`read_binned_table`). Planets are log-uniform in
    R and P within a bin.

Uncertainty. Each uncertain rate is driven by a quantile ``q`` in (0, 1) (a factor with a
``uniform(0, 1)`` prior) through a fixed mapping:

- a rate ``r`` with errors ``+e_up / -e_down`` is a two-piece lognormal with median ``r``:
  ``rate(q) = r exp(s z)``, ``z = Phi^-1(q)``, with ``s = ln((r + e_up) / r)`` for ``z > 0`` and
  ``s = ln(r / (r - e_down))`` for ``z < 0``. So ``q = 0.5`` gives ``r`` and ``q = Phi(+-1)``
  (0.1587, 0.8413) give exactly ``r - e_down`` and ``r + e_up``. A lognormal cannot reach 0, so
  ``e_down`` must be smaller than ``r`` (a bin consistent with zero is an upper limit);
- the power law's ``spread`` is the same lognormal with ``s = ln(spread)`` on both sides: the
  1-sigma interval of every cell's rate is ``[nominal / spread, nominal * spread]``;
- an upper limit ``U`` is a rate uniform on ``[0, U]``: ``rate(q) = q U`` (``U / 2`` at ``q = 0.5``
  and in ``uncertainty = "none"``).

``uncertainty = "shared"`` adds one factor ``occurrence.rates`` whose quantile moves every rate
(all optimistic or all pessimistic together); ``"independent"`` adds one factor per rate,
``occurrence.rates.<label>``, all in the group ``occurrence.rates``; ``"none"`` adds none.

The *envelope* of a cell, used by the thinning draw of :mod:`sweep.planets`, is its rate at
quantile :data:`ENVELOPE_QUANTILE` of every factor: fixed by the spec, never by factor values.

References
----------
.. [1] Kopparapu, R. K. et al. 2018, ApJ 856, 122 (tabulates the SAG13 occurrence rates);
   doi:10.3847/1538-4357/aab205 (reference details from memory)
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from importlib.resources import files
from pathlib import Path
from typing import Annotated, Literal, Union

# scipy.stats is imported where used (the factors' priors, built on the client): worker processes
# import this module and never need it.
import astropy.units as u
import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator
from scipy.special import ndtri

from sweep import params
from sweep.catalogs import column_values, find_column, read_table, spectral_class_codes
from sweep.errors import UserInputError
from sweep.structs import SPECTRAL_CLASSES

#: Quantile of every rate factor at which the envelope of the thinning draw is set.
ENVELOPE_QUANTILE = 0.99
#: Prefix of the implicit factors (the spec section's name).
FACTOR_PREFIX = "occurrence.rates"
#: Prefix that names a table shipped in ``sweep/data`` instead of a path.
PACKAGED = "sweep:"
_DAYS_PER_YEAR = 365.25  # Julian year [d]

Uncertainty = Literal["shared", "independent", "none"]
ClassName = Literal["F", "G", "K", "M"]


class PowerLawPiece(BaseModel):
    """One radius range of a power law: ``Gamma R^alpha P^beta`` (R in R_earth, P in years)."""

    model_config = ConfigDict(extra="forbid")

    radius_max_rearth: float | None = Field(
        default=None, gt=0, description="Upper radius of this piece [R_earth]; omit for the last piece.")
    gamma: float = Field(ge=0, description="Normalisation Gamma [planets per star per unit ln R per unit ln P].")
    alpha: float = Field(description="Radius exponent alpha [1].")
    beta: float = Field(description="Period exponent beta, P in years [1].")


def _check_pieces(pieces):
    if pieces is None:
        return
    if not pieces:
        raise ValueError("pieces must not be empty")
    edges = [p.radius_max_rearth for p in pieces]
    if edges[-1] is not None or any(e is None for e in edges[:-1]):
        raise ValueError("every piece but the last needs radius_max_rearth; the last has none")
    if any(b <= a for a, b in zip(edges[:-2], edges[1:-1])):
        raise ValueError("radius_max_rearth of the pieces must increase")


class ClassOverride(BaseModel):
    """A spectral class's own power law (``preset`` or ``pieces``) and/or a factor on its rates."""

    model_config = ConfigDict(extra="forbid")

    preset: Literal["sag13"] | None = Field(default=None, description="Published parameterisation.")
    pieces: list[PowerLawPiece] | None = Field(default=None, description="Explicit pieces, by increasing radius.")
    scale: float = Field(default=1.0, ge=0, description="Factor on every rate of this class [1] (0: no planets).")

    @model_validator(mode="after")
    def _one_shape(self):
        if self.preset is not None and self.pieces is not None:
            raise ValueError("give 'preset' or 'pieces', not both")
        _check_pieces(self.pieces)
        return self


class PowerLawSection(BaseModel):
    """Occurrence model ``dN / (dlnR dlnP) = Gamma R^alpha P^beta``, piecewise in radius."""

    model_config = ConfigDict(extra="forbid")

    kind: Literal["power-law"]
    preset: Literal["sag13"] | None = Field(default=None, description="Published parameterisation ('sag13').")
    pieces: list[PowerLawPiece] | None = Field(default=None, description="Explicit pieces, by increasing radius.")
    scale: float = Field(default=1.0, ge=0, description="Factor on every rate [1].")
    radius_rearth: tuple[float, float] = Field(default=(0.5, 16.0), description="Radius domain [R_earth].")
    period_d: tuple[float, float] = Field(default=(10.0, 640.0), description="Period domain [d].")
    spread: float = Field(default=2.0, ge=1.0, description="1-sigma multiplicative uncertainty of the rates [1].")
    uncertainty: Uncertainty = Field(default="shared", description="How rate uncertainties are correlated.")
    cells_per_efold: int = Field(default=3, ge=1, le=50, description="Grid cells per factor e in R and in P.")
    classes: dict[ClassName, ClassOverride] = Field(default_factory=dict, description="Per-class overrides.")

    @model_validator(mode="after")
    def _valid(self):
        if (self.preset is None) == (self.pieces is None):
            raise ValueError("give exactly one of preset = 'sag13' or pieces = [...]")
        _check_pieces(self.pieces)
        for name, (low, high) in (("radius_rearth", self.radius_rearth), ("period_d", self.period_d)):
            if not (0 < low < high < np.inf):
                raise ValueError(f"{name} must be [min, max] with 0 < min < max")
        return self


class BinnedSection(BaseModel):
    """Occurrence model from a table of radius x period bins per class (see :func:`read_binned_table`)."""

    model_config = ConfigDict(extra="forbid")

    kind: Literal["binned"]
    table: str = Field(description="ECSV table, relative to the spec; 'sweep:<name>' for a packaged one.")
    uncertainty: Uncertainty = Field(default="shared", description="How rate uncertainties are correlated.")


#: The ``occurrence`` section of a spec: a union on ``kind``.
OccurrenceSection = Annotated[Union[PowerLawSection, BinnedSection], Field(discriminator="kind")]


@dataclass
class _Cells:
    """Cells of one class (flat lists), before padding into the model's arrays."""

    lnr: list  # (lo, hi) pairs, ln R_earth
    lnp: list  # (lo, hi) pairs, ln days
    alpha: list
    beta: list
    base: list  # median rate, or the limit U for upper limits [planets per star]
    sig_lo: list
    sig_hi: list
    upper: list
    source: list  # index into the model's source labels


def _new_cells() -> _Cells:
    return _Cells(*([] for _ in range(9)))


def _power_integral(exponent, x1, x2):
    """``integral of exp(exponent x) dx`` from x1 to x2 (exact, also for exponent 0)."""
    exponent = np.asarray(exponent, float)
    safe = np.where(exponent == 0, 1.0, exponent)
    return np.where(exponent == 0, x2 - x1, (np.exp(exponent * x2) - np.exp(exponent * x1)) / safe)


class OccurrenceModel:
    """Rates per star in cells (per spectral class), with their uncertainty factors.

    Arrays have shape ``(n_classes, n_cells)`` (classes in the order of
    :data:`~sweep.structs.SPECTRAL_CLASSES`); classes with fewer cells are padded with cells of
    rate 0. Attributes ``lnr_lo, lnr_hi`` [ln R_earth], ``lnp_lo, lnp_hi`` [ln d], ``alpha, beta``
    (within-cell exponents of R and P [1]), ``envelope`` [planets per star].
    """

    def __init__(self, per_class: dict[int, _Cells], labels: list[str], uncertainty: str, description: str):
        self.uncertainty = uncertainty
        self.description = description
        self.source_labels = list(labels)
        n_classes = len(SPECTRAL_CLASSES)
        n_cells = max([len(c.base) for c in per_class.values()] + [1])
        self.n_classes, self.n_cells = n_classes, n_cells

        def fill(getter, default=0.0, dtype=float):
            out = np.full((n_classes, n_cells), default, dtype=dtype)
            for code, cells in per_class.items():
                values = getter(cells)
                out[code, :len(values)] = values
            return out

        self.lnr_lo = fill(lambda c: [a for a, _ in c.lnr])
        self.lnr_hi = fill(lambda c: [b for _, b in c.lnr])
        self.lnp_lo = fill(lambda c: [a for a, _ in c.lnp])
        self.lnp_hi = fill(lambda c: [b for _, b in c.lnp])
        self.alpha = fill(lambda c: c.alpha)
        self.beta = fill(lambda c: c.beta)
        self._base = fill(lambda c: c.base)
        self._sig_lo = fill(lambda c: c.sig_lo)
        self._sig_hi = fill(lambda c: c.sig_hi)
        self._upper = fill(lambda c: c.upper, False, bool)
        self._source = fill(lambda c: c.source, 0, np.int64)
        self.valid = fill(lambda c: [True] * len(c.base), False, bool)
        self.nominal = self._rates_at(np.full((n_classes, n_cells), 0.5))
        if uncertainty == "none":
            self.envelope = self.nominal
        else:
            self.envelope = self._rates_at(np.full((n_classes, n_cells), ENVELOPE_QUANTILE))

    # -- factors -------------------------------------------------------------------------------
    def factor_names(self) -> list[str]:
        """Names of the implicit factors, in the order of :meth:`factors`."""
        if self.uncertainty == "shared":
            return [FACTOR_PREFIX]
        if self.uncertainty == "independent":
            return [f"{FACTOR_PREFIX}.{label}" for label in self.source_labels]
        return []

    def factors(self) -> list[params.Factor]:
        """The model's implicit factors: rate quantiles with a ``uniform(0, 1)`` prior."""
        import scipy.stats

        group = FACTOR_PREFIX if self.uncertainty == "independent" else None
        return [params.Factor(name, scipy.stats.uniform(0.0, 1.0), group, "1") for name in self.factor_names()]

    # -- rates ---------------------------------------------------------------------------------
    def _rates_at(self, quantile):
        """Rates at quantiles that broadcast against ``(n_classes, n_cells)``."""
        quantile = np.asarray(quantile, float)
        z = ndtri(quantile)
        if z.ndim == 3 and z.shape[1:] == (1, 1):
            lognormal = self._per_row_lognormal(z.reshape(-1))
        else:
            lognormal = np.where(z < 0, self._sig_lo, self._sig_hi)
            lognormal *= z
            np.exp(lognormal, out=lognormal)
        lognormal *= self._base
        if not self._upper.any():
            return lognormal
        return np.where(self._upper, self._base * quantile, lognormal)

    @functools.cached_property
    def _spreads(self):
        """The distinct spreads of the cells, and each cell's index into them (below, above)."""
        values, index = np.unique(np.concatenate([self._sig_lo.ravel(), self._sig_hi.ravel()]), return_inverse=True)
        lo_index, hi_index = index.reshape(2, self.n_classes, self.n_cells)
        return values, lo_index, hi_index

    def _per_row_lognormal(self, z):
        """``exp(sigma z)`` with one z per row, shape ``(n_rows, n_classes, n_cells)``.

        The same numbers as the general case, with ``exp`` taken once per row and distinct
        sigma (cells share a few spreads) and then spread over the cells.
        """
        values, lo_index, hi_index = self._spreads
        per_value = np.exp(z[:, None] * values)  # (n_rows, n_values)
        negative = z < 0
        lognormal = np.take(per_value, hi_index, axis=1)
        if negative.any():
            lognormal[negative] = np.take(per_value[negative], lo_index, axis=1)
        return lognormal

    def cell_quantiles(self, factor_values: dict, n_rows: int | None = None) -> np.ndarray:
        """Quantile of every cell's rate, shape ``(n_rows, n_classes, n_cells)``.

        Parameters
        ----------
        factor_values : dict of str to ndarray
            Factor values by name (arrays of shape ``(n_rows,)`` or scalars); other names are ignored.
        n_rows : int, optional
            Number of rows when the model has no factor (default 1).
        """
        names = self.factor_names()
        missing = [n for n in names if n not in factor_values]
        if missing:
            raise KeyError(f"factor values lack the occurrence factors {missing[:3]}")
        if not names:
            return np.full((n_rows or 1, self.n_classes, self.n_cells), 0.5)
        columns = [np.atleast_1d(np.asarray(factor_values[n], float)) for n in names]
        rows = max(len(c) for c in columns) if n_rows is None else n_rows
        by_source = np.stack([np.broadcast_to(c, (rows,)) for c in columns], axis=-1)
        if self.uncertainty == "shared":
            return np.broadcast_to(by_source[:, :1, None], (rows, self.n_classes, self.n_cells))
        return by_source[:, self._source]

    def cell_rates(self, factor_values: dict, n_rows: int | None = None) -> np.ndarray:
        """Expected planets per star in every cell, shape ``(n_rows, n_classes, n_cells)``.

        Parameters
        ----------
        factor_values : dict of str to ndarray
            Factor values by name, arrays of shape ``(n_rows,)`` (see :meth:`cell_quantiles`).
        n_rows : int, optional
            Number of rows when the model has no factor.
        """
        if self.uncertainty == "none":
            return np.broadcast_to(self.nominal, (n_rows or 1, self.n_classes, self.n_cells)).copy()
        quantiles = self.cell_quantiles(factor_values, n_rows)
        if self.uncertainty == "shared":  # one quantile per row: the inverse normal CDF once per row
            quantiles = quantiles[:, :1, :1]
        return self._rates_at(quantiles)  # broadcasts to (n_rows, n_classes, n_cells)

    def expected_planets_per_star(self, factor_values: dict, n_rows: int | None = None) -> np.ndarray:
        """Expected planets per star of each class, shape ``(n_rows, n_classes)`` (analytic)."""
        return self.cell_rates(factor_values, n_rows).sum(axis=-1)

    def cell_labels(self) -> np.ndarray:
        """Label of the rate that drives each cell, shape ``(n_classes, n_cells)`` ('' for padding)."""
        labels = np.array(self.source_labels + [""], dtype=object)
        return np.where(self.valid, labels[self._source], "")


# ---------------------------------------------------------------------------------------------
# power law
# ---------------------------------------------------------------------------------------------
def sag13_pieces() -> list[PowerLawPiece]:
    """The packaged SAG13 pieces (``sweep/data/sag13_power_law.ecsv``; values from memory).

    References
    ----------
    .. [1] Kopparapu, R. K. et al. 2018, ApJ 856, 122; doi:10.3847/1538-4357/aab205 (from memory)
    """
    path = files("sweep") / "data" / "sag13_power_law.ecsv"
    table = read_table(Path(str(path)), "SAG13 table")
    pieces = []
    for row in table:
        top = float(row["radius_max_rearth"])
        pieces.append(PowerLawPiece(radius_max_rearth=top if np.isfinite(top) else None,
                                    gamma=float(row["gamma"]), alpha=float(row["alpha"]), beta=float(row["beta"])))
    return pieces


def _uniform_edges(low, high, per_efold):
    n = max(1, int(np.ceil((high - low) * per_efold - 1e-9)))
    edges = np.linspace(low, high, n + 1)
    edges[-1] = high
    return edges


def _power_law_cells(pieces, scale, section: PowerLawSection, sigma, variant, labels, label_index):
    cells = _new_cells()
    lnr_min, lnr_max = np.log(section.radius_rearth)
    lnp_edges = _uniform_edges(*np.log(section.period_d), section.cells_per_efold)
    lnp_edges_yr = lnp_edges - np.log(_DAYS_PER_YEAR)
    lower = -np.inf
    radius_cell = 0
    for piece in pieces:
        upper = np.inf if piece.radius_max_rearth is None else np.log(piece.radius_max_rearth)
        low, high = max(lower, lnr_min), min(upper, lnr_max)
        lower = upper
        if high <= low:
            continue
        lnr_edges = _uniform_edges(low, high, section.cells_per_efold)
        for i in range(len(lnr_edges) - 1):
            r_int = _power_integral(piece.alpha, lnr_edges[i], lnr_edges[i + 1])
            for j in range(len(lnp_edges) - 1):
                p_int = _power_integral(piece.beta, lnp_edges_yr[j], lnp_edges_yr[j + 1])
                label = f"{variant}_r{radius_cell}_p{j}"
                if label not in label_index:
                    label_index[label] = len(labels)
                    labels.append(label)
                cells.lnr.append((lnr_edges[i], lnr_edges[i + 1]))
                cells.lnp.append((lnp_edges[j], lnp_edges[j + 1]))
                cells.alpha.append(piece.alpha)
                cells.beta.append(piece.beta)
                cells.base.append(float(scale * piece.gamma * r_int * p_int))
                cells.sig_lo.append(sigma)
                cells.sig_hi.append(sigma)
                cells.upper.append(False)
                cells.source.append(label_index[label])
            radius_cell += 1
    return cells


def build_power_law(section: PowerLawSection) -> OccurrenceModel:
    """The cells of a power-law model (see the module docstring)."""
    sigma = float(np.log(section.spread))
    top = sag13_pieces() if section.preset == "sag13" else section.pieces
    labels, label_index, per_class = [], {}, {}
    for code, letter in enumerate(SPECTRAL_CLASSES):
        override = section.classes.get(letter)
        pieces, variant, scale = top, "all", section.scale
        if override is not None:
            scale = section.scale * override.scale
            if override.preset == "sag13":
                pieces, variant = sag13_pieces(), letter
            elif override.pieces is not None:
                pieces, variant = override.pieces, letter
        per_class[code] = _power_law_cells(pieces, scale, section, sigma, variant, labels, label_index)
    name = section.preset or "explicit pieces"
    return OccurrenceModel(per_class, labels, section.uncertainty, f"power law ({name})")


# ---------------------------------------------------------------------------------------------
# binned
# ---------------------------------------------------------------------------------------------
#: Columns of a binned table: name -> unit (None: dimensionless).
BINNED_COLUMNS = {
    "radius_min_rearth": u.R_earth, "radius_max_rearth": u.R_earth,
    "period_min_d": u.d, "period_max_d": u.d,
    "rate": u.dimensionless_unscaled, "rate_err_up": u.dimensionless_unscaled,
    "rate_err_down": u.dimensionless_unscaled,
}


def _label(letter, r1, r2, p1, p2):
    text = f"{letter}_R{r1:g}-{r2:g}_P{p1:g}-{p2:g}"
    return text.replace(".", "p")


def read_binned_table(path, uncertainty: str = "shared") -> OccurrenceModel:
    """Read a binned occurrence table (ECSV) and check every row.

    Columns: ``spectral_class`` (F, G, K, M), ``radius_min_rearth``, ``radius_max_rearth``
    [R_earth], ``period_min_d``, ``period_max_d`` [d] (units from the table when given),
    ``rate`` (expected planets per star in the bin), ``rate_err_up``, ``rate_err_down`` (1-sigma
    distances from ``rate``), optional ``upper_limit`` (true: ``rate`` is an upper limit and the
    errors are ignored) and optional ``label`` (the factor's name in independent mode). Bins of one
    class must not overlap; classes without bins get no planets.

    Parameters
    ----------
    path : str or Path
        The table.
    uncertainty : {"shared", "independent", "none"}
        How the rates' uncertainties are correlated (module docstring).
    """
    path = Path(path)
    table = read_table(path, "occurrence table")
    columns = {}
    for name in ("spectral_class", "upper_limit", "label", *BINNED_COLUMNS):
        columns[name] = find_column(table, (name,))
        if columns[name] is None and name not in ("upper_limit", "label"):
            raise UserInputError(
                f"{path}: missing column '{name}' (required: spectral_class, "
                f"{', '.join(BINNED_COLUMNS)}; optional: upper_limit, label)")
    codes = spectral_class_codes(table, columns["spectral_class"], path)
    n = len(table)
    if columns["upper_limit"] is None:
        upper = np.zeros(n, bool)
    else:
        raw = np.asarray(table[columns["upper_limit"]]).astype(str)
        truth = np.char.lower(np.char.strip(raw))
        bad = ~np.isin(truth, ["true", "false", "1", "0"])
        if bad.any():
            row = np.flatnonzero(bad)[0]
            raise UserInputError(f"{path}, row {row + 1}, column '{columns['upper_limit']}': "
                                 f"'{raw[row]}' is not a boolean (true/false)")
        upper = np.isin(truth, ["true", "1"])
    values = {}
    for name, unit in BINNED_COLUMNS.items():
        errors = name.startswith("rate_err")
        values[name] = column_values(table, columns[name], unit, path, positive=name.endswith(("_rearth", "_d")),
                                     nan_ok=errors)
    rate, up, down = values["rate"], values["rate_err_up"], values["rate_err_down"]

    def fail(mask, column, problem):
        row = np.flatnonzero(mask)[0]
        raise UserInputError(f"{path}, row {row + 1}, column '{columns[column]}': {problem}")

    for low, high in (("radius_min_rearth", "radius_max_rearth"), ("period_min_d", "period_max_d")):
        if (values[high] <= values[low]).any():
            fail(values[high] <= values[low], high, f"must be larger than {low}")
    if (rate < 0).any():
        fail(rate < 0, "rate", "must be >= 0 (expected planets per star in the bin)")
    measured = ~upper
    if (measured & (rate == 0)).any():
        fail(measured & (rate == 0), "rate", "a measured rate must be > 0; mark a bin consistent with 0 as upper_limit")
    for name, err in (("rate_err_up", up), ("rate_err_down", down)):
        bad = measured & ~(np.isfinite(err) & (err >= 0))
        if bad.any():
            fail(bad, name, "must be a finite number >= 0 (1-sigma error; only upper limits may leave it empty)")
    if (measured & (down >= rate)).any():
        fail(measured & (down >= rate), "rate_err_down",
             "must be smaller than rate (the lognormal cannot reach 0); give the bin as an upper_limit instead")
    r1, r2 = values["radius_min_rearth"], values["radius_max_rearth"]
    p1, p2 = values["period_min_d"], values["period_max_d"]
    overlap = ((codes[:, None] == codes[None, :]) & (r1[:, None] < r2[None, :]) & (r1[None, :] < r2[:, None])
               & (p1[:, None] < p2[None, :]) & (p1[None, :] < p2[:, None]))
    np.fill_diagonal(overlap, False)
    if overlap.any():
        i, j = np.argwhere(overlap)[0]
        raise UserInputError(f"{path}, row {j + 1}, columns radius/period: bin overlaps the bin of row {i + 1} "
                             "(bins of one spectral class must not overlap)")
    if columns["label"] is not None:
        labels = [str(v) for v in np.asarray(table[columns["label"]]).astype(str)]
    else:
        labels = [_label(SPECTRAL_CLASSES[c], a, b, p, q) for c, a, b, p, q in zip(codes, r1, r2, p1, p2)]
    seen = {}
    for row, label in enumerate(labels):
        if not label or any(ch in label for ch in ". \t"):
            raise UserInputError(f"{path}, row {row + 1}, column 'label': '{label}' must be non-empty, "
                                 "without dots or spaces")
        if label in seen:
            raise UserInputError(f"{path}, row {row + 1}, column 'label': '{label}' repeats row {seen[label] + 1}")
        seen[label] = row

    with np.errstate(divide="ignore", invalid="ignore"):
        sig_hi = np.where(measured, np.log((rate + up) / rate), 0.0)
        sig_lo = np.where(measured, np.log(rate / (rate - down)), 0.0)
    per_class = {}
    for code in range(len(SPECTRAL_CLASSES)):
        cells = _new_cells()
        for row in np.flatnonzero(codes == code):
            cells.lnr.append((np.log(r1[row]), np.log(r2[row])))
            cells.lnp.append((np.log(p1[row]), np.log(p2[row])))
            cells.alpha.append(0.0)
            cells.beta.append(0.0)
            cells.base.append(float(rate[row]))
            cells.sig_lo.append(float(sig_lo[row]))
            cells.sig_hi.append(float(sig_hi[row]))
            cells.upper.append(bool(upper[row]))
            cells.source.append(int(row))
        per_class[code] = cells
    return OccurrenceModel(per_class, labels, uncertainty, f"binned table {path.name}")


def table_path(table: str, base_dir: Path) -> Path:
    """The file a ``table`` key names: ``sweep:<name>`` is packaged, anything else relative to ``base_dir``."""
    if table.startswith(PACKAGED):
        return Path(str(files("sweep") / "data" / table[len(PACKAGED):]))
    return Path(base_dir) / table


def build_occurrence(section, base_dir: Path) -> OccurrenceModel:
    """The occurrence model of a validated ``occurrence`` section.

    Parameters
    ----------
    section : PowerLawSection or BinnedSection
        The validated section.
    base_dir : Path
        Directory of the spec file (binned tables are relative to it).
    """
    if isinstance(section, PowerLawSection):
        return build_power_law(section)
    return read_binned_table(table_path(section.table, base_dir), section.uncertainty)
