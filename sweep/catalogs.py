"""Star lists: read any table astropy reads, check it, and make invented neighbourhoods.

A star list is a table with one row per star. Columns are found by name (case does not matter);
units come from the table when it carries them (ECSV, FITS and VOTable do; ECSV is preferred) and
are otherwise those named by the column's suffix:

==========================  ============  =========================================================
column                      unit          meaning
==========================  ============  =========================================================
``distance_pc``             pc            distance from the Sun (required, > 0)
``teff_K``                  K             effective temperature (required, > 0)
``radius_rsun``             R_sun         stellar radius (required, > 0)
``mass_msun``               M_sun         stellar mass (required, > 0)
``spectral_class``          --            F, G, K or M; a full type (``G2V``) counts by its letter
``luminosity_lsun``         L_sun         optional; from radius and T_eff where absent or empty
``name``                    --            optional; ``star <row>`` where absent
``ecliptic_latitude_deg``   deg           optional; NaN (unknown) where absent
``<band>_mag``              mag           optional apparent magnitudes (``V_mag``, ``J_mag``...)
==========================  ============  =========================================================

A column may also be named without its unit suffix (``distance``, ``teff``, ``radius``, ``mass``,
``luminosity``, ``ecliptic_latitude``) when the table gives its unit; ``spectral_type`` is accepted
for ``spectral_class``. Units are converted with :mod:`astropy.units`.

Every problem raises :class:`~sweep.errors.UserInputError` naming the file, the row (data rows count
from 1) and the column. :func:`synthetic_neighbourhood` invents star lists for demos and tests.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Literal

# astropy.table and astropy.io are imported where used (reading and making tables, on the client):
# worker processes import this module and never need them.
import astropy.units as u
import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator

from sweep.errors import UserInputError
from sweep.physics import stars as stellar
from sweep.structs import SPECTRAL_CLASSES, StarTable

if TYPE_CHECKING:
    from astropy.table import Table

#: Numeric columns: (canonical name, unit, required, bare alias usable when the table gives a unit).
STAR_COLUMNS = (
    ("distance_pc", u.pc, True, "distance"),
    ("teff_K", u.K, True, "teff"),
    ("radius_rsun", u.R_sun, True, "radius"),
    ("mass_msun", u.M_sun, True, "mass"),
    ("luminosity_lsun", u.L_sun, False, "luminosity"),
    ("ecliptic_latitude_deg", u.deg, False, "ecliptic_latitude"),
)

#: Default share of each spectral class among main-sequence F-M stars of the solar neighbourhood.
#: Rounded, from memory of the volume-complete 10 pc census (Reyle et al. 2021, A&A 650, A201,
#: doi:10.1051/0004-6361/202140985, from memory): M dwarfs dominate, F stars are a few per cent.
DEFAULT_PROPORTIONS = {"F": 0.04, "G": 0.08, "K": 0.14, "M": 0.74}

#: Mass range searched for main-sequence stars of classes F to M [M_sun].
_MASS_SEARCH_MSUN = (0.08, 1.6)


class SyntheticNeighbourhood(BaseModel):
    """An invented neighbourhood: ``n`` stars uniform in a sphere (see :func:`synthetic_neighbourhood`)."""

    model_config = ConfigDict(extra="forbid")

    n: int = Field(gt=0, description="Number of stars.")
    radius_pc: float = Field(gt=0, description="Radius of the sphere around the Sun [pc].")
    seed: int = Field(ge=0, description="Seed: the same seed gives the same stars.")
    proportions: dict[Literal["F", "G", "K", "M"], float] | None = Field(
        default=None, description="Relative share of each spectral class (default: DEFAULT_PROPORTIONS)."
    )

    @model_validator(mode="after")
    def _proportions_valid(self):
        if self.proportions is not None:
            if any(not np.isfinite(v) or v < 0 for v in self.proportions.values()):
                raise ValueError("proportions must be finite numbers >= 0")
            if sum(self.proportions.values()) <= 0:
                raise ValueError("proportions must not all be 0")
        return self


class StarsSection(BaseModel):
    """The star list of a sweep: a file (path relative to the spec file) or an invented neighbourhood."""

    model_config = ConfigDict(extra="forbid")

    file: str | None = Field(default=None, description="Star list (ECSV, CSV, FITS, VOTable), relative to the spec.")
    synthetic: SyntheticNeighbourhood | None = Field(default=None, description="An invented neighbourhood instead.")

    @model_validator(mode="after")
    def _exactly_one(self):
        if (self.file is None) == (self.synthetic is None):
            raise ValueError("give exactly one of 'file' or 'synthetic'")
        return self


def load_stars(section: StarsSection, base_dir: Path) -> StarTable:
    """The star list a spec section names.

    Parameters
    ----------
    section : StarsSection
        The validated ``stars`` section.
    base_dir : Path
        Directory of the spec file; ``section.file`` is relative to it.
    """
    if section.file is not None:
        return read_star_table(Path(base_dir) / section.file)
    s = section.synthetic
    table = synthetic_neighbourhood(s.n, s.radius_pc, s.seed, s.proportions)
    return star_table_from(table, f"synthetic neighbourhood (seed {s.seed})")


def read_table(path: Path, what: str) -> Table:
    """Read a table with astropy (format from the extension or the content); one-line errors."""
    from astropy.io.registry import IORegistryError
    from astropy.table import Table

    path = Path(path)
    if not path.is_file():
        raise UserInputError(f"{path}: {what} not found (expected an ECSV, CSV, FITS or VOTable file)")
    try:
        try:
            table = Table.read(path)
        except IORegistryError:  # format not recognised from the name or content: try plain text
            table = Table.read(path, format="ascii")
    except Exception as exc:  # astropy raises many kinds; every one means "cannot read this file"
        reason = (str(exc).strip().splitlines() or [""])[0][:200]
        raise UserInputError(
            f"{path}: cannot read the {what} ({type(exc).__name__}: {reason}); expected ECSV, CSV, FITS or VOTable"
        ) from None
    table.convert_bytestring_to_unicode()
    if len(table) == 0:
        raise UserInputError(f"{path}: the {what} has no rows")
    return table


def find_column(table: Table, names: tuple[str, ...]) -> str | None:
    """The table's name for the first of ``names`` it has, matched without regard to case."""
    lower = {c.lower(): c for c in table.colnames}
    for name in names:
        if name.lower() in lower:
            return lower[name.lower()]
    return None


def _first_bad(source, column: str, bad: np.ndarray, problem: str) -> UserInputError:
    rows = np.flatnonzero(bad)
    more = f" (and {len(rows) - 1} more {'row' if len(rows) == 2 else 'rows'})" if len(rows) > 1 else ""
    return UserInputError(f"{source}, row {rows[0] + 1}, column '{column}': {problem}{more}")


def column_values(table: Table, column: str, unit: u.Unit, source, *, positive: bool = False,
                  nan_ok: bool = False) -> np.ndarray:
    """A numeric column as float64 in ``unit``, checked row by row.

    Parameters
    ----------
    table : astropy.table.Table
        The table.
    column : str
        Column name in the table.
    unit : astropy.units.Unit
        Unit wanted; the column's own unit is converted to it (its absence means ``unit``).
    source : str or Path
        File name for error messages.
    positive : bool
        Require every value > 0.
    nan_ok : bool
        Allow empty (masked) or NaN entries, returned as NaN.
    """
    col = table[column]
    if col.dtype.kind not in "biuf":
        try:
            data = np.asarray(col, dtype=float)
        except (TypeError, ValueError):
            text = np.asarray(col).astype(str)
            bad = np.array([not _is_number(v) for v in text])
            raise _first_bad(source, column, bad, f"'{text[bad][0]}' is not a number") from None
    else:
        data = np.asarray(col, dtype=float)
    mask = np.ma.getmaskarray(col) if hasattr(col, "mask") else np.zeros(len(col), bool)
    data = np.where(mask, np.nan, data)
    if col.unit is not None and col.unit != unit:
        try:
            data = (data * u.Unit(col.unit)).to_value(unit, equivalencies=u.temperature())
        except (u.UnitsError, ValueError, TypeError):
            raise UserInputError(
                f"{source}, column '{column}': unit '{col.unit}' cannot be converted to {unit.to_string()}"
            ) from None
    if not nan_ok:
        bad = ~np.isfinite(data)
        if bad.any():
            raise _first_bad(source, column, bad, "missing or not a finite number")
    if positive:
        bad = np.isfinite(data) & (data <= 0)
        if bad.any():
            value = data[bad][0]
            raise _first_bad(source, column, bad, f"must be > 0, got {value:g} {unit.to_string()}")
    return data


def _is_number(text: str) -> bool:
    try:
        float(text)
        return True
    except ValueError:
        return False


def spectral_class_codes(table: Table, column: str, source) -> np.ndarray:
    """Codes (index into :data:`~sweep.structs.SPECTRAL_CLASSES`) from a column of class letters or types."""
    col = table[column]
    text = np.char.strip(np.asarray(col).astype(str))
    if hasattr(col, "mask"):
        text = np.where(np.ma.getmaskarray(col), "", text)
    letters = np.char.upper(np.array([t[:1] for t in text], dtype="U1"))
    codes = np.full(len(text), -1, dtype=np.int8)
    for code, letter in enumerate(SPECTRAL_CLASSES):
        codes[letters == letter] = code
    bad = codes < 0
    if bad.any():
        raise _first_bad(source, column, bad,
                         f"unknown spectral class '{text[bad][0]}'; allowed: {', '.join(SPECTRAL_CLASSES)} "
                         "(or a full type such as G2V)")
    return codes


def read_star_table(path) -> StarTable:
    """Read and check a star list (ECSV, CSV, FITS or VOTable); see the module docstring for columns."""
    path = Path(path)
    return star_table_from(read_table(path, "star list"), path)


def star_table_from(table: Table, source) -> StarTable:
    """Check an astropy table of stars and turn it into a :class:`~sweep.structs.StarTable`.

    Parameters
    ----------
    table : astropy.table.Table
        One row per star, columns as in the module docstring.
    source : str or Path
        Where the table came from, for error messages.
    """
    if len(table) == 0:
        raise UserInputError(f"{source}: the star list has no rows")
    values = {}
    for name, unit, required, alias in STAR_COLUMNS:
        column = find_column(table, (name,))
        if column is None:
            column = find_column(table, (alias,))
            if column is not None and table[column].unit is None:
                raise UserInputError(
                    f"{source}, column '{column}': no unit given; name it '{name}' or give its unit in the table"
                )
        if column is None:
            if required:
                raise UserInputError(
                    f"{source}: missing column '{name}' (required columns: distance_pc, teff_K, "
                    "radius_rsun, mass_msun, spectral_class)"
                )
            values[name] = np.full(len(table), np.nan)
            continue
        values[name] = column_values(table, column, unit, source, positive=name != "ecliptic_latitude_deg",
                                     nan_ok=not required)
    class_column = find_column(table, ("spectral_class", "spectral_type"))
    if class_column is None:
        raise UserInputError(f"{source}: missing column 'spectral_class' (F, G, K or M for every star)")
    codes = spectral_class_codes(table, class_column, source)

    luminosity = values["luminosity_lsun"]
    derived = stellar.luminosity_lsun(values["radius_rsun"], values["teff_K"])
    luminosity = np.where(np.isfinite(luminosity), luminosity, derived)

    name_column = find_column(table, ("name",))
    if name_column is not None:
        names = np.asarray(table[name_column]).astype(str)
    else:
        names = np.array([f"star {i + 1}" for i in range(len(table))])

    magnitudes = {}
    for column in table.colnames:
        if column.lower().endswith("_mag"):
            magnitudes[column[:-4]] = column_values(table, column, u.mag, source, nan_ok=True)

    return StarTable(
        name=names,
        distance_pc=values["distance_pc"],
        teff_K=values["teff_K"],
        radius_rsun=values["radius_rsun"],
        mass_msun=values["mass_msun"],
        luminosity_lsun=np.asarray(luminosity, dtype=float),
        spectral_class=codes,
        ecliptic_latitude_deg=values["ecliptic_latitude_deg"],
        magnitudes=magnitudes,
    )


def _class_mass_ranges() -> dict[str, tuple[float, float]]:
    """Mass range of each class on the main sequence, from the physics module's own relations."""
    mass = np.geomspace(*_MASS_SEARCH_MSUN, 4001)
    codes = np.asarray(stellar.spectral_class_code(stellar.main_sequence_teff_K(mass)))
    ranges = {}
    for code, letter in enumerate(SPECTRAL_CLASSES):
        inside = mass[codes == code]
        if len(inside):
            ranges[letter] = (float(inside.min()), float(inside.max()))
    return ranges


def synthetic_neighbourhood(n: int, radius_pc: float, seed: int, proportions: dict | None = None) -> Table:
    """An invented star list: ``n`` main-sequence stars uniform in a sphere around the Sun.

    Distances follow ``r = R u^(1/3)`` (uniform density in the sphere) and directions are isotropic,
    so the ecliptic latitude has ``sin(beta)`` uniform on [-1, 1]. Each star's class is drawn with
    the given proportions; its mass is log-uniform over the masses whose main-sequence effective
    temperature falls in that class, and T_eff, radius and luminosity follow from the mass through
    :mod:`sweep.physics.stars`. The same ``seed`` gives the same table. The stars are invented data;
    the table's ``meta`` says so.

    Parameters
    ----------
    n : int
        Number of stars.
    radius_pc : float
        Radius of the sphere [pc].
    seed : int
        Seed of the generator.
    proportions : dict of str to float, optional
        Relative share of each class (``{"F": ..., "G": ..., "K": ..., "M": ...}``); missing
        classes get none. Default :data:`DEFAULT_PROPORTIONS`.

    Returns
    -------
    astropy.table.Table
        Columns ``name``, ``distance_pc`` [pc], ``teff_K`` [K], ``radius_rsun`` [R_sun],
        ``mass_msun`` [M_sun], ``luminosity_lsun`` [L_sun], ``spectral_class``,
        ``ecliptic_latitude_deg`` [deg], with units.
    """
    from astropy.table import Table

    proportions = dict(DEFAULT_PROPORTIONS if proportions is None else proportions)
    share = np.array([float(proportions.get(c, 0.0)) for c in SPECTRAL_CLASSES])
    if share.sum() <= 0 or (share < 0).any():
        raise ValueError("proportions must be >= 0 and not all 0")
    ranges = _class_mass_ranges()
    rng = np.random.default_rng(seed)
    uniforms = rng.random((4, n))
    codes = np.searchsorted(np.cumsum(share) / share.sum(), uniforms[0], side="right").clip(0, 3)
    low = np.array([np.log(ranges.get(c, (1.0, 1.0))[0]) for c in SPECTRAL_CLASSES])
    high = np.array([np.log(ranges.get(c, (1.0, 1.0))[1]) for c in SPECTRAL_CLASSES])
    mass = np.exp(low[codes] + uniforms[1] * (high[codes] - low[codes]))
    distance = radius_pc * np.cbrt(uniforms[2])
    latitude = np.degrees(np.arcsin(2.0 * uniforms[3] - 1.0))
    table = Table(meta={
        "description": "INVENTED star list: a synthetic solar neighbourhood, not real stars",
        "invented": True,
        "generator": "sweep.catalogs.synthetic_neighbourhood",
        "n": int(n), "radius_pc": float(radius_pc), "seed": int(seed),
        "proportions": {c: float(p) for c, p in zip(SPECTRAL_CLASSES, share / share.sum())},
    })
    table["name"] = [f"Invented {i + 1:04d}" for i in range(n)]
    table["distance_pc"] = distance * u.pc
    table["teff_K"] = stellar.main_sequence_teff_K(mass) * u.K
    table["radius_rsun"] = stellar.main_sequence_radius_rsun(mass) * u.R_sun
    table["mass_msun"] = mass * u.M_sun
    table["luminosity_lsun"] = stellar.main_sequence_luminosity_lsun(mass) * u.L_sun
    table["spectral_class"] = np.array(SPECTRAL_CLASSES)[codes]
    table["ecliptic_latitude_deg"] = latitude * u.deg
    return table


def write_star_table(table: Table, path) -> None:
    """Write a star list as ECSV (units and ``meta`` travel in its header).

    Parameters
    ----------
    table : astropy.table.Table
        The star list.
    path : str or Path
        Output file.
    """
    table.write(Path(path), format="ascii.ecsv", overwrite=True)
