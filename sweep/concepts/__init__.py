"""Instrument concepts: detection models, one module per kind, behind one small interface.

A concept turns the planets of a block into detection masks, one per band::

    concept = build_concept(parse_concept(raw_table, where="study.toml: concepts[0]"))
    mask = concept.detect(planets, stars, resolved_section)   # bool, (n_bands, n_planets)

``resolved_section`` is the concept's validated section after :func:`sweep.params.resolve`: every
numeric field is a float (fixed, or the current grid point) or an array of shape ``(n_rows,)``
(an uncertain factor, one value per row of the block); index such arrays by ``planets.row``.
The model also passes the block, ``detect(planets, stars, resolved_section, block=block)``: its rows
key per-star draws (the exozodi level of ``detection = "snr"``); concepts that draw nothing per
star ignore it.

Two detection models, chosen per concept by ``detection``: ``"threshold"`` (the default: a flux
limit per band) and ``"snr"`` (a photon-noise budget in the concept's ``noise`` table,
:mod:`sweep.concepts.noise_budget`, ``docs/noise_model.md``).

Built-in kinds: ``"interferometer"`` (:mod:`sweep.concepts.interferometer`, thermal emission) and
``"coronagraph"`` (:mod:`sweep.concepts.coronagraph`, reflected light).

Adding a kind
-------------
Inside ``sweep``: write ``sweep/concepts/<kind>.py`` with a section schema and a :class:`Concept`
subclass, call :func:`register` at the bottom, and import the module at the end of this file.

Outside ``sweep`` (a plug-in): name a class as ``kind = "module:Class"`` in the sweep definition,
where ``module`` is an importable module name (``my_concepts.lidar``) or a path to a ``.py``
file (``workflows/plugin_concept.py``, relative to ``base_dir`` or the working directory). The
class must have a ``Schema`` attribute (a pydantic model with ``extra="forbid"`` and at least the
fields ``name``, ``kind`` and ``bands``) and implement the :class:`Concept` interface; the easiest
way is to subclass :class:`Concept` and :class:`ConceptSchema`. See ``workflows/plugin_concept.py``.
Dask workers import the plug-in too: a file must be readable at the same absolute path on every
worker (a shared file system), a module importable there (same environment and ``PYTHONPATH``).

.. warning::
   Naming a plug-in in a sweep definition **imports and runs that Python module with your
   permissions**, on this machine and on every dask worker. Only name modules you wrote or trust,
   as with any Python code you run.
"""

from __future__ import annotations

import importlib
import importlib.abc
import importlib.util
import re
import sys
import types
from abc import ABC, abstractmethod
from pathlib import Path
from typing import Any, Callable, ClassVar

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from sweep import params as _params
from sweep.errors import UserInputError
from sweep.spec_messages import validation_message
from sweep.params import PositiveParam
from sweep.physics import radiation
from sweep.physics._constants import AU_M, PC_M, R_SUN_M

__all__ = [
    "BandSchema",
    "Concept",
    "ConceptSchema",
    "LastResult",
    "angular_separation_rad",
    "angular_window",
    "build_concept",
    "cache_key",
    "concept_schema",
    "is_scalar",
    "kinds",
    "nominal",
    "parse_concept",
    "per_planet",
    "register",
    "sensitivity_scale",
    "star_blackbody_uJy",
]

_NAME_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9_+-]*$"


class BandSchema(BaseModel):
    """A band of a concept: a top-hat in wavelength. Kinds add their own sensitivity fields."""

    model_config = ConfigDict(extra="forbid")

    name: str = Field(pattern=_NAME_PATTERN, description="Band label (letters, digits, _ + -).")
    center_um: PositiveParam = Field(description="Band centre wavelength [um].")
    width_um: PositiveParam = Field(description="Full band width in wavelength [um].")

    @model_validator(mode="after")
    def _width_below_twice_centre(self):
        if _params.bounds(self.width_um)[1] >= 2.0 * _params.bounds(self.center_um)[0]:
            raise ValueError(
                f"band {self.name!r}: width_um must be smaller than twice center_um "
                "(the band would reach zero wavelength)"
            )
        return self


class ConceptSchema(BaseModel):
    """Fields every concept section has. Kinds subclass it and narrow ``kind`` and ``bands``."""

    model_config = ConfigDict(extra="forbid")

    name: str = Field(pattern=_NAME_PATTERN, description="Concept label (letters, digits, _ + -).")
    kind: str = Field(description="Concept kind: a built-in kind or 'module:Class' (a plug-in).")
    bands: list[BandSchema] = Field(min_length=1, description="Observing bands (at least one).")

    @field_validator("bands", mode="after")
    @classmethod
    def _distinct_band_names(cls, bands):
        return _params.require_distinct_names(bands, "band")


def per_planet(value, row: np.ndarray):
    """A resolved parameter at each planet: a float stays a float, a per-row array is indexed.

    Parameters
    ----------
    value : float or ndarray, shape (n_rows,)
        A resolved parameter (fixed or grid point: float; uncertain factor: one value per row).
    row : ndarray of int
        Row of each planet within the block (``planets.row``).
    """
    if np.ndim(value) == 0:
        return float(value)
    return np.asarray(value, np.float64)[row]


def is_scalar(*values) -> bool:
    """True when every resolved parameter is a single number (no per-row factor among them)."""
    return all(np.ndim(v) == 0 for v in values)


def nominal(value) -> float:
    """A representative number of an unresolved parameter: the fixed value, the median grid value
    or the median of the distribution."""
    if isinstance(value, _params.Grid):
        return float(np.median(value.grid))
    if isinstance(value, _params.Uncertain):
        return float(value.frozen().median())
    return float(value)


def cache_key(*values) -> tuple:
    """A hashable, comparable key of resolved parameters (floats or per-row arrays)."""
    return tuple(float(v) if np.ndim(v) == 0 else np.asarray(v).tobytes() for v in values)


def angular_separation_rad(planets, stars) -> np.ndarray:
    """Projected angular separation of every planet from its star [rad]: separation / distance.

    Parameters
    ----------
    planets : sweep.structs.PlanetBatch
        The planets (``separation_au`` [au], ``star`` indices).
    stars : sweep.structs.StarTable
        Their host stars (``distance_pc`` [pc]).
    """
    rad_per_au = AU_M / (PC_M * np.asarray(stars.distance_pc, np.float64))
    return planets.separation_au * rad_per_au[planets.star]


def angular_window(theta, inner_per_um, outer_per_um, bands, row) -> np.ndarray:
    """Planets between an inner and an outer angular limit that scale with wavelength, per band.

    ``inner_per_um * lambda <= theta <= outer_per_um * lambda`` with ``lambda`` each band's centre.

    Parameters
    ----------
    theta : ndarray, shape (n_planets,)
        Angular separation of each planet [rad].
    inner_per_um, outer_per_um : float or ndarray
        The limits per micrometre of wavelength, per planet [rad um^-1].
    bands : list of BandSchema
        The resolved bands (``center_um`` a float or a per-row array) [um].
    row : ndarray of int
        Row of each planet (``planets.row``).

    Returns
    -------
    ndarray of bool, shape (n_bands, n_planets)
    """
    out = np.empty((len(bands), len(theta)), dtype=bool)
    for i, band in enumerate(bands):
        center = per_planet(band.center_um, row)
        np.greater_equal(theta, inner_per_um * center, out=out[i])
        out[i] &= theta <= outer_per_um * center
    return out


def sensitivity_scale(reference_diameter_m, diameter_m, row):
    """Factor on flux limits given for a reference aperture: ``(reference / D)^2``, or 1 without one.

    Parameters
    ----------
    reference_diameter_m : float, ndarray or None
        Resolved ``sensitivity_reference_diameter_m`` [m]; None: the limits do not depend on D.
    diameter_m : float or ndarray
        Aperture (or collector) diameter at each planet [m].
    row : ndarray of int
        Row of each planet (``planets.row``).
    """
    if reference_diameter_m is None:
        return 1.0
    return (per_planet(reference_diameter_m, row) / diameter_m) ** 2


def star_blackbody_uJy(center_um, width_um, stars, index=slice(None)):
    """Blackbody flux density of stars in a band (T_eff and radius at their distance) [uJy].

    Parameters
    ----------
    center_um, width_um : float or ndarray
        Band centre and full width [um].
    stars : sweep.structs.StarTable
        The star list.
    index : slice or ndarray of int, optional
        Stars to evaluate (every star by default; ``planets.star`` for one value per planet).
    """
    return radiation.blackbody_flux_density_uJy(
        center_um, width_um, np.asarray(stars.teff_K, np.float64)[index],
        np.asarray(stars.radius_rsun, np.float64)[index] * R_SUN_M,
        np.asarray(stars.distance_pc, np.float64)[index] * PC_M)


class LastResult:
    """Remembers one result, keyed by an object's identity and a tuple of numbers.

    Grid points of a block see the same planets; a quantity that depends only on the planets and
    on parameters that did not change (a band's thermal flux when only the aperture is gridded)
    is then computed once per block. The entry is replaced in one attribute assignment, so threads
    sharing a concept never see a mixed entry. Holding the object keeps ``is`` identity sound.
    """

    __slots__ = ("_entry",)

    def __init__(self):
        self._entry = None

    def __reduce__(self):  # a pickled concept travels without the block it last saw
        return (LastResult, ())

    def get(self, owner: Any, key: tuple, compute: Callable[[], Any]):
        entry = self._entry
        if entry is not None and entry[0] is owner and entry[1] == key:
            return entry[2]
        value = compute()
        self._entry = (owner, key, value)
        return value


class Concept(ABC):
    """What the model needs from an instrument concept.

    Subclasses set :attr:`Schema` and implement :meth:`detect`. They are built once per sweep from
    the validated (unresolved) section and must not keep per-block state other than caches.

    Parameters
    ----------
    section : ConceptSchema
        The validated concept section (numbers may still be grids or distributions).
    """

    #: The pydantic schema of this kind's section.
    Schema: ClassVar[type[BaseModel]] = ConceptSchema

    def __init__(self, section: BaseModel):
        self.section = section

    @property
    def name(self) -> str:
        """The concept's label."""
        return self.section.name

    @property
    def band_names(self) -> list[str]:
        """Band labels, in the order of the first axis of :meth:`detect`."""
        return [band.name for band in self.section.bands]

    @property
    def band_wavelengths_um(self) -> list[float]:
        """Nominal band centres [um] (the fixed value, or the median grid value or prior median)."""
        return [nominal(band.center_um) for band in self.section.bands]

    @abstractmethod
    def detect(self, planets, stars, params, block=None) -> np.ndarray:
        """Detection masks.

        Parameters
        ----------
        planets : sweep.structs.PlanetBatch
            Planets of a block.
        stars : sweep.structs.StarTable
            Their host stars (``planets.star`` indexes this table).
        params : BaseModel
            This concept's section after :func:`sweep.params.resolve` (floats or ``(n_rows,)``
            arrays).
        block : sweep.blocks.RowBlock, optional
            The block the planets were drawn for (its rows key per-star random draws). Without it,
            per-star draws take their population median.

        Returns
        -------
        ndarray of bool, shape (n_bands, n_planets)
            True where the planet is detected in the band.
        """

    def total_time_h(self, stars) -> float | None:
        """Observing time one survey (one row) implies at the nominal values [h], or None.

        None for concepts without a time model (threshold detection); see
        :meth:`sweep.concepts.noise_budget.SnrDetection.total_time_h`.
        """
        return None


_REGISTRY: dict[str, tuple[type[BaseModel], Callable[[BaseModel], Concept]]] = {}


def register(kind: str, section_schema: type[BaseModel], factory: Callable[[BaseModel], Concept]) -> None:
    """Make a concept kind available under ``kind = "<kind>"`` in sweep definitions.

    Parameters
    ----------
    kind : str
        The kind's name.
    section_schema : type
        Pydantic model of the section (``extra="forbid"``; fields ``name``, ``kind``, ``bands``).
    factory : callable
        ``factory(validated_section) -> Concept``.
    """
    if not re.fullmatch(r"[a-z][a-z0-9_-]*", kind):
        raise ValueError(f"concept kind {kind!r} must be lower-case letters, digits, '_' or '-'")
    _check_schema(section_schema, kind)
    _REGISTRY[kind] = (section_schema, factory)


def kinds() -> list[str]:
    """Names of the registered (built-in) kinds."""
    return sorted(_REGISTRY)


def _check_schema(schema: Any, kind: str) -> None:
    if not (isinstance(schema, type) and issubclass(schema, BaseModel)):
        raise TypeError(f"concept kind {kind!r}: the section schema must be a pydantic BaseModel")
    missing = {"name", "kind", "bands"} - set(schema.model_fields)
    if missing:
        raise TypeError(f"concept kind {kind!r}: the section schema lacks the fields {sorted(missing)}")


#: Package under which plug-in files are imported: ``<package>.p<hex of the absolute path>``.
#: The name encodes the file, so a dask worker that unpickles a plug-in class imports the same
#: file (given the same file system) through :class:`_PluginFileFinder`.
_PLUGIN_PACKAGE = __name__ + "._plugin_files"
_PLUGINS_BY_SCHEMA: dict[type, type] = {}


class _PluginFileFinder(importlib.abc.MetaPathFinder):
    """Finds ``sweep.concepts._plugin_files.p<hex>`` modules: the file whose path is the hex."""

    def find_spec(self, fullname, path=None, target=None):
        prefix = _PLUGIN_PACKAGE + ".p"
        if not fullname.startswith(prefix):
            return None
        try:
            file = bytes.fromhex(fullname[len(prefix):]).decode()
        except ValueError:
            return None
        return importlib.util.spec_from_file_location(fullname, file)


def _install_plugin_finder() -> None:
    if _PLUGIN_PACKAGE not in sys.modules:
        package = types.ModuleType(_PLUGIN_PACKAGE, "Plug-in concept modules imported from files.")
        package.__path__ = []
        sys.modules[_PLUGIN_PACKAGE] = package
    if not any(isinstance(finder, _PluginFileFinder) for finder in sys.meta_path):
        sys.meta_path.append(_PluginFileFinder())


_install_plugin_finder()


def _load_plugin(kind: str, where: str, base_dir: Path | None):
    module_name, _, class_name = kind.rpartition(":")
    if not module_name or not class_name.isidentifier():
        raise UserInputError(
            f"{where}.kind: {kind!r} is not a concept kind; use one of {', '.join(kinds())} "
            "or a plug-in written 'module:Class' or 'path/to/file.py:Class'"
        )
    if module_name.endswith(".py"):
        path = Path(module_name).expanduser()
        if not path.is_absolute():
            path = (base_dir or Path.cwd()) / path
        if not path.is_file():
            raise UserInputError(f"{where}.kind: plug-in file {str(path)!r} does not exist")
        module_name = f"{_PLUGIN_PACKAGE}.p{str(path.resolve()).encode().hex()}"
    try:
        module = importlib.import_module(module_name)
    except ImportError as exc:
        raise UserInputError(f"{where}.kind: cannot import plug-in module {module_name!r}: {exc}") from None
    cls = getattr(module, class_name, None)
    if not isinstance(cls, type):
        raise UserInputError(f"{where}.kind: plug-in module {module_name!r} has no class {class_name!r}")
    schema = getattr(cls, "Schema", None)
    try:
        _check_schema(schema, kind)
    except TypeError as exc:
        raise UserInputError(f"{where}.kind: {exc}; see sweep.concepts.ConceptSchema") from None
    if not callable(getattr(cls, "detect", None)):
        raise UserInputError(f"{where}.kind: plug-in class {kind!r} has no detect() method")
    _PLUGINS_BY_SCHEMA[schema] = cls
    return schema, cls


def _schema_and_factory(kind: str, where: str = "concept", base_dir: Path | None = None):
    if kind in _REGISTRY:
        return _REGISTRY[kind]
    if ":" in kind:
        return _load_plugin(kind, where, base_dir)
    raise UserInputError(
        f"{where}.kind: unknown concept kind {kind!r}; use one of {', '.join(kinds())} "
        "or a plug-in written 'module:Class'"
    )


def concept_schema(kind: str) -> type[BaseModel]:
    """The section schema of a kind (built-in, or a plug-in named ``module:Class``)."""
    return _schema_and_factory(kind)[0]


def parse_concept(raw: dict, where: str, base_dir: Path | str | None = None) -> BaseModel:
    """Validate one concept section of a sweep definition.

    Parameters
    ----------
    raw : dict
        The section as read from TOML.
    where : str
        Prefix naming the section in messages, e.g. ``"study.toml: concepts[1]"``.
    base_dir : path, optional
        Directory against which a plug-in's relative ``.py`` path is resolved (default: the
        working directory).

    Returns
    -------
    BaseModel
        The validated section (an instance of the kind's schema).

    Raises
    ------
    UserInputError
        One line naming the key path: unknown kind, unknown key, value out of range...
    """
    if not isinstance(raw, dict):
        raise UserInputError(f"{where}: a concept must be a table with keys name, kind and bands")
    kind = raw.get("kind")
    if not isinstance(kind, str):
        raise UserInputError(
            f"{where}.kind: required, one of {', '.join(kinds())} or a plug-in 'module:Class'"
        )
    schema, _ = _schema_and_factory(kind, where, Path(base_dir) if base_dir is not None else None)
    try:
        return schema.model_validate(raw)
    except ValidationError as exc:
        file, _, prefix = where.rpartition(": ")
        raise UserInputError(validation_message(exc, raw, prefix, file or "sweep definition", schema)) from None


def build_concept(section: BaseModel) -> Concept:
    """The :class:`Concept` of a validated section (from :func:`parse_concept`)."""
    plugin = _PLUGINS_BY_SCHEMA.get(type(section))
    if plugin is not None:
        return plugin(section)
    _, factory = _schema_and_factory(section.kind)
    return factory(section)


# Built-in kinds register themselves on import.
from sweep.concepts import noise_budget as _noise_budget  # noqa: E402,F401
from sweep.concepts import coronagraph as _coronagraph  # noqa: E402,F401
from sweep.concepts import interferometer as _interferometer  # noqa: E402,F401
