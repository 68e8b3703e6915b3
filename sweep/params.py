"""Fixed, gridded and uncertain numbers: the one idea of the sweep definition.

Any numeric parameter of a sweep definition is written one of three ways::

    aperture_m     = 6.0                                            # fixed
    aperture_m     = { grid = [4.0, 6.0, 8.0] }                     # a grid axis of the cube
    contrast_floor = { dist = "loguniform", a = 1e-11, b = 1e-10 }  # uncertain: a factor

Schemas of every section (occurrence models, priors, concepts) type such fields as :data:`Param`
(or one of its range-checked forms). :func:`collect` finds them in a validated section and names
them by dotted path; :func:`resolve` returns a copy of the section in which every parameter is a
plain number (fixed or grid point) or an array with one value per row of a block (factor). Model
code therefore reads numbers, never spec syntax.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Annotated, Any, Callable, Iterator, Union

# scipy.stats is imported where used (validation, frozen priors): worker processes import this
# module and never need it.
import numpy as np
from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Discriminator,
    Field,
    Tag,
    model_validator,
)

#: Unit of a parameter, read from its key's suffix (DESIGN.md: units live in the key name).
UNIT_SUFFIXES = {
    "_m": "m",
    "_um": "um",
    "_K": "K",
    "_pc": "pc",
    "_au": "au",
    "_uJy": "uJy",
    "_Jy": "Jy",
    "_searth": "S_earth",
    "_lod": "lambda/D",
    "_mas": "mas",
    "_per_s": "s^-1",
    "_h": "h",
    "_s": "s",
    "_e": "e-",
    "_d": "d",
    "_yr": "yr",
    "_rearth": "R_earth",
    "_mearth": "M_earth",
    "_msun": "M_sun",
    "_rsun": "R_sun",
    "_lsun": "L_sun",
    "_ms": "m/s",
    "_mag": "mag",
    "_zodi": "zodi",
    "_deg": "deg",
}


def unit_from_key(key: str) -> str:
    """Return the unit named by a key's suffix (``aperture_m`` -> ``"m"``), or ``"1"``."""
    for suffix, unit in UNIT_SUFFIXES.items():
        if key.endswith(suffix):
            return unit
    return "1"


class Grid(BaseModel):
    """A grid axis: the parameter takes each listed value; the cube gains a dimension."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    grid: list[float] = Field(min_length=1, description="Values of the axis, in the key's unit.")

    @model_validator(mode="after")
    def _finite_and_distinct(self):
        if not all(math.isfinite(v) for v in self.grid):
            raise ValueError("grid values must be finite numbers")
        if len(set(self.grid)) != len(self.grid):
            raise ValueError("grid values must be distinct")
        return self

    def bounds(self) -> tuple[float, float]:
        return min(self.grid), max(self.grid)


class Uncertain(BaseModel):
    """An uncertain parameter: a factor of the analysis with a ``scipy.stats`` prior.

    ``dist`` names a continuous distribution of :mod:`scipy.stats`; every other key except
    ``group`` is passed to it as a keyword argument (``loc``, ``scale``, shape parameters), so the
    arguments are exactly those of ``scipy.stats``. ``group`` puts the factor into a named group for
    the Sobol analysis (its members are varied together).
    """

    model_config = ConfigDict(extra="allow", frozen=True)

    dist: str = Field(description="Name of a continuous distribution in scipy.stats.")
    group: str | None = Field(default=None, description="Sobol group this factor belongs to.")

    @property
    def args(self) -> dict[str, float]:
        """Keyword arguments for the scipy.stats distribution."""
        return dict(self.__pydantic_extra__ or {})

    @model_validator(mode="after")
    def _scipy_accepts(self):
        import scipy.stats

        family = getattr(scipy.stats, self.dist, None)
        if not isinstance(family, scipy.stats.rv_continuous):
            raise ValueError(
                f"dist = {self.dist!r} is not a continuous distribution of scipy.stats "
                "(for example 'uniform', 'loguniform', 'norm', 'lognorm', 'beta', 'truncnorm')"
            )
        for key, value in self.args.items():
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise ValueError(f"argument {key} = {value!r} of dist {self.dist!r} must be a number")
        try:
            frozen = family(**self.args)
            median = float(frozen.ppf(0.5))
        except TypeError as exc:
            raise ValueError(f"scipy.stats.{self.dist} rejects the arguments {self.args}: {exc}") from None
        if not math.isfinite(median):
            raise ValueError(
                f"scipy.stats.{self.dist} with arguments {self.args} is not a valid distribution "
                "(check the parameter ranges in the scipy.stats documentation)"
            )
        return self

    def frozen(self):
        """The frozen ``scipy.stats`` distribution of this factor."""
        import scipy.stats

        return getattr(scipy.stats, self.dist)(**self.args)

    def bounds(self) -> tuple[float, float]:
        low, high = self.frozen().support()
        return float(low), float(high)


def _kind(value: Any) -> str | None:
    if isinstance(value, dict):
        if "grid" in value:
            return "grid"
        if "dist" in value:
            return "dist"
        return None
    if isinstance(value, Grid):
        return "grid"
    if isinstance(value, Uncertain):
        return "dist"
    return "fixed"


def _finite(value: float) -> float:
    if not math.isfinite(value):
        raise ValueError("must be a finite number")
    return value


#: A numeric parameter: a number, ``{grid = [...]}`` or ``{dist = "...", ...}``.
Param = Annotated[
    Union[
        Annotated[Annotated[float, AfterValidator(_finite)], Tag("fixed")],
        Annotated[Grid, Tag("grid")],
        Annotated[Uncertain, Tag("dist")],
    ],
    Discriminator(
        _kind,
        custom_error_type="parameter_form",
        custom_error_message="expected a number, { grid = [...] } or { dist = \"<scipy.stats name>\", ... }",
    ),
]


def bounds(param) -> tuple[float, float]:
    """Smallest and largest value a parameter can take (a distribution's support)."""
    if isinstance(param, (Grid, Uncertain)):
        return param.bounds()
    return float(param), float(param)


def _range_check(*, gt: float | None = None, ge: float | None = None, le: float | None = None,
                 lt: float | None = None, what: str) -> Callable:
    def check(param):
        low, high = bounds(param)
        ok = (gt is None or low > gt) and (ge is None or low >= ge) and (
            le is None or high <= le) and (lt is None or high < lt)
        if not ok:
            span = f"{low:g}" if low == high else f"[{low:g}, {high:g}]"
            raise ValueError(f"must be {what}; got {span}")
        return param

    return check


#: A parameter whose every possible value is > 0 (lengths, temperatures, times, fluxes).
PositiveParam = Annotated[Param, AfterValidator(_range_check(gt=0.0, what="> 0"))]
#: A parameter whose every possible value is >= 0.
NonNegativeParam = Annotated[Param, AfterValidator(_range_check(ge=0.0, what=">= 0"))]
#: A parameter whose every possible value lies in [0, 1] (albedos, throughputs, fractions).
FractionParam = Annotated[Param, AfterValidator(_range_check(ge=0.0, le=1.0, what="within [0, 1]"))]


@dataclass(frozen=True)
class Factor:
    """An uncertain input of the analysis.

    Attributes
    ----------
    name : str
        Dotted path of the parameter (or a name a model gives an implicit factor).
    dist : scipy.stats frozen distribution
        Its prior; row values are ``dist.ppf(quantile)``.
    group : str or None
        Sobol group (members are swapped together in Saltelli designs).
    unit : str
        Unit of its values.
    """

    name: str
    dist: Any
    group: str | None = None
    unit: str = "1"

    @property
    def analysis_unit(self) -> str:
        """The name under which Sobol indices report this factor (its group, if any)."""
        return self.group or self.name


@dataclass(frozen=True)
class ParamSite:
    """Where a parameter sits: its dotted path, its key's unit and its declared form."""

    path: str
    unit: str
    param: Any

    @property
    def is_grid(self) -> bool:
        return isinstance(self.param, Grid)

    @property
    def is_factor(self) -> bool:
        return isinstance(self.param, Uncertain)

    def factor(self) -> Factor:
        """The :class:`Factor` of an uncertain parameter."""
        return Factor(self.path, self.param.frozen(), self.param.group, self.unit)


def _item_label(item: Any, index: int) -> str:
    name = getattr(item, "name", None)
    return str(name) if isinstance(name, str) and name else str(index)


def _fields_and_extras(model: BaseModel) -> Iterator[tuple[str, Any]]:
    for name in type(model).model_fields:
        yield name, getattr(model, name)
    yield from (model.__pydantic_extra__ or {}).items()


def _walk(value: Any, path: str, key: str) -> Iterator[ParamSite]:
    if isinstance(value, (Grid, Uncertain)) or (
        isinstance(value, (int, float)) and not isinstance(value, bool)
    ):
        yield ParamSite(path, unit_from_key(key), value)
    elif isinstance(value, BaseModel):
        for field, child in _fields_and_extras(value):
            yield from _walk(child, f"{path}.{field}" if path else field, field)
    elif isinstance(value, (list, tuple)):
        for index, item in enumerate(value):
            yield from _walk(item, f"{path}.{_item_label(item, index)}", key)
    elif isinstance(value, dict):
        for k, item in value.items():
            yield from _walk(item, f"{path}.{k}" if path else str(k), str(k))


def collect(section: BaseModel, prefix: str) -> list[ParamSite]:
    """Every numeric parameter of a validated section, named by dotted path under ``prefix``.

    List items are named by their ``name`` field when they have one (``concepts.mirror.bands.V``),
    otherwise by their position.
    """
    return list(_walk(section, prefix, prefix.rsplit(".", 1)[-1]))


#: Returns the number (or per-row array) a parameter takes: ``value_of(path, param)``.
ValueSource = Callable[[str, Any], "float | np.ndarray"]


def _resolve(value: Any, path: str, value_of: ValueSource) -> Any:
    if isinstance(value, (Grid, Uncertain)):
        return value_of(path, value)
    if isinstance(value, BaseModel):
        update = {}
        for field, child in _fields_and_extras(value):
            new = _resolve(child, f"{path}.{field}" if path else field, value_of)
            if new is not child:
                update[field] = new
        return value.model_copy(update=update) if update else value
    if isinstance(value, list):
        new_items = [_resolve(item, f"{path}.{_item_label(item, i)}", value_of) for i, item in enumerate(value)]
        return new_items if any(a is not b for a, b in zip(new_items, value)) else value
    if isinstance(value, dict):
        new_map = {k: _resolve(v, f"{path}.{k}" if path else str(k), value_of) for k, v in value.items()}
        return new_map if any(new_map[k] is not value[k] for k in value) else value
    return value


def resolve(section: BaseModel, prefix: str, value_of: ValueSource):
    """A copy of ``section`` with every grid or uncertain parameter replaced by ``value_of(path, param)``.

    Fixed numbers are left as they are. The copy is not re-validated: a factor becomes an array of
    shape ``(n_rows,)`` (one value per row of the block), a grid parameter the float of the current
    grid point.
    """
    return _resolve(section, prefix, value_of)


def require_distinct_names(items, what: str):
    """Schema check for lists of named tables (bands, criteria): raise ``ValueError`` on a repeat."""
    names = [item.name for item in items]
    repeated = sorted({name for name in names if names.count(name) > 1})
    if repeated:
        raise ValueError(f"{what} names must be distinct; repeated: {', '.join(repeated)}")
    return items
