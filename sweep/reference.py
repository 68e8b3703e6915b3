"""The key reference of sweep definitions, generated from the pydantic schemas.

Every section schema (the ones in :mod:`sweep.spec` and those the model modules own) is walked
field by field, nested tables, lists of tables and discriminated unions included. Each key is
listed with its dotted path, type, unit (from the key's suffix, :func:`sweep.params.unit_from_key`),
default, allowed values and the description written in its ``Field``. The result is
``docs/reference.md``; a test fails when the schemas and that file drift apart. Regenerate with::

    python -m sweep.reference --write          # writes docs/reference.md
    python -m sweep.reference > docs/reference.md
"""

from __future__ import annotations

import argparse
import math
import re
import sys
import types
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Annotated, Any, Literal, Union

import annotated_types
from pydantic import AfterValidator, BaseModel
from pydantic.fields import FieldInfo
from pydantic_core import PydanticUndefined

from sweep import params

#: Where the generated reference lives, relative to the repository root.
REFERENCE_PATH = Path("docs") / "reference.md"
#: The command that regenerates it (named in the file and in the drift test's message).
REGENERATE = "python -m sweep.reference --write"

#: How the reference names the type of a parameter (fixed, grid or uncertain).
PARAM_TYPE = "number, grid or distribution"


def _param_ranges() -> dict:
    """Range constraint of each range-checked parameter type, keyed by its validator function."""
    found = {}
    for alias, text in ((params.PositiveParam, "> 0"), (params.NonNegativeParam, ">= 0"),
                        (params.FractionParam, "[0, 1]")):
        for meta in typing.get_args(alias)[1:]:
            if isinstance(meta, AfterValidator):
                found[meta.func] = text
    return found


_PARAM_RANGES = _param_ranges()

_PLURAL = {"number": "numbers", "integer": "integers", "string": "strings", "table": "tables",
           "boolean": "booleans", PARAM_TYPE: "parameters"}
_SINGULAR = {"criteria": "criterion", "classes": "class"}


@dataclass(frozen=True)
class Key:
    """One row of the reference: a key of a sweep definition.

    Attributes
    ----------
    path : str
        Dotted key path (placeholders in angle brackets: ``concepts.<concept>.bands.<band>.center_um``).
    type : str
        What the key takes ("number, grid or distribution" for parameters).
    unit : str
        Unit of its numbers, from the key's suffix; "" for keys without numbers.
    default : str
        The default as TOML, "required", or "not set".
    allowed : str
        Allowed values: range, choices, pattern.
    description : str
        Meaning, from the schema's ``Field(description=...)``.
    """

    path: str
    type: str
    unit: str
    default: str
    allowed: str
    description: str


@dataclass
class Section:
    """A table of the reference: one section (or one variant of a section) of a sweep definition."""

    title: str
    summary: str
    keys: list[Key] = field(default_factory=list)


@dataclass
class _Walk:
    """State of a walk: the keys found and the fields whose schema gives no description."""

    keys: list[Key] = field(default_factory=list)
    undescribed: list[str] = field(default_factory=list)


# --------------------------------------------------------------------------------------------
# Types
# --------------------------------------------------------------------------------------------


def _peel(tp) -> tuple[Any, list]:
    """The type inside ``Annotated`` layers, and their metadata (outermost last)."""
    meta: list = []
    while typing.get_origin(tp) is Annotated:
        args = typing.get_args(tp)
        tp, meta = args[0], list(args[1:]) + meta
    return tp, meta


def _union_args(tp) -> tuple | None:
    if typing.get_origin(tp) in (Union, types.UnionType):
        return typing.get_args(tp)
    return None


def _is_param(tp) -> bool:
    args = _union_args(tp)
    return args is not None and {params.Grid, params.Uncertain} <= {_peel(a)[0] for a in args}


def _is_model(tp) -> bool:
    return isinstance(tp, type) and issubclass(tp, BaseModel)


def _number(value) -> str:
    return f"{value:g}" if isinstance(value, float) else str(value)


def _constraints(meta: list) -> list[str]:
    """Readable constraints from pydantic/annotated-types metadata."""
    out = []
    for item in meta:
        if isinstance(item, FieldInfo):
            out.extend(_constraints(item.metadata))
        elif isinstance(item, annotated_types.Gt):
            out.append(f"> {_number(item.gt)}")
        elif isinstance(item, annotated_types.Ge):
            out.append(f">= {_number(item.ge)}")
        elif isinstance(item, annotated_types.Lt):
            out.append(f"< {_number(item.lt)}")
        elif isinstance(item, annotated_types.Le):
            out.append(f"<= {_number(item.le)}")
        elif isinstance(item, annotated_types.MinLen):
            out.append(f"at least {item.min_length} item{'s' if item.min_length != 1 else ''}")
        elif isinstance(item, annotated_types.MaxLen):
            out.append(f"at most {item.max_length} items")
        elif isinstance(item, AfterValidator) and item.func in _PARAM_RANGES:
            out.append(_PARAM_RANGES[item.func])
        elif getattr(item, "pattern", None):
            out.append(f"matches `{item.pattern}`")
    return out


@dataclass
class _Shape:
    """What a type annotation means for a user: words, allowed values, nested tables."""

    type: str
    allowed: list[str]
    numeric: bool = False
    children: list = field(default_factory=list)  # (path suffix, model class)


def _literal_text(value) -> str:
    return f'"{value}"' if isinstance(value, str) else _toml(value)


def _singular(field_name: str) -> str:
    return _SINGULAR.get(field_name, field_name.rstrip("s"))


def _shape(tp, meta: list) -> _Shape:
    tp, inner_meta = _peel(tp)
    meta = inner_meta + list(meta)
    if _is_param(tp):
        return _Shape(PARAM_TYPE, _constraints(meta), numeric=True)
    union = _union_args(tp)
    if union is not None:
        options = [a for a in union if a is not type(None)]
        if len(options) == 1:  # Optional[X]
            return _shape(options[0], meta)
        shapes = [_shape(option, []) for option in options]
        kinds = list(dict.fromkeys(s.type for s in shapes))
        allowed = [text for s in shapes for text in s.allowed]
        children = [child for s in shapes for child in s.children]
        return _Shape(" or ".join(kinds), allowed + _constraints(meta),
                      any(s.numeric for s in shapes), children)
    origin = typing.get_origin(tp)
    if origin is Literal:
        values = typing.get_args(tp)
        kind = "string" if all(isinstance(v, str) for v in values) else "value"
        return _Shape(kind, [", ".join(_literal_text(v) for v in values)])
    if origin in (list, tuple):
        args = [a for a in typing.get_args(tp) if a is not Ellipsis]
        if origin is tuple and len(args) > 1:
            inner = [_shape(a, []) for a in args]
            return _Shape("[" + ", ".join(s.type for s in inner) + "]",
                          [t for s in inner for t in s.allowed] + _constraints(meta),
                          any(s.numeric for s in inner))
        item = _shape(args[0], []) if args else _Shape("value", [])
        allowed = [f"each {text}" for text in item.allowed] + _constraints(meta)
        children = [("<item>", model) for _, model in item.children]
        return _Shape(f"list of {_PLURAL.get(item.type, item.type)}", allowed, item.numeric, children)
    if origin is dict:
        key_tp, value_tp = typing.get_args(tp)
        key, value = _shape(key_tp, []), _shape(value_tp, [])
        allowed = []
        if typing.get_origin(_peel(key_tp)[0]) is Literal:
            names = typing.get_args(_peel(key_tp)[0])
            allowed.append("keys " + ", ".join(str(n) for n in names))
        children = [("<key>", model) for _, model in value.children]
        return _Shape(f"table of {_PLURAL.get(value.type, value.type)}", allowed + value.allowed,
                      value.numeric, children)
    if _is_model(tp):
        return _Shape("table", _constraints(meta), children=[("", tp)])
    if tp is bool:
        return _Shape("boolean", ["true, false"])
    if tp is int:
        return _Shape("integer", _constraints(meta))
    if tp is float:
        return _Shape("number", _constraints(meta), numeric=True)
    if tp is str:
        return _Shape("string", _constraints(meta))
    if isinstance(tp, type) and issubclass(tp, Path):
        return _Shape("string (path)", _constraints(meta))
    return _Shape(getattr(tp, "__name__", str(tp)), _constraints(meta))


# --------------------------------------------------------------------------------------------
# Values
# --------------------------------------------------------------------------------------------


def _toml(value) -> str:
    """A Python value written as TOML (inline)."""
    if isinstance(value, BaseModel):
        value = value.model_dump(mode="json", exclude_none=True)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    if isinstance(value, dict):
        if not value:
            return "{}"
        return "{ " + ", ".join(f"{k} = {_toml(v)}" for k, v in value.items()) + " }"
    return str(value)


def _default(info: FieldInfo) -> str:
    if info.is_required():
        return "required"
    if info.default_factory is not None:
        value = info.default_factory()
    else:
        value = info.default
    if value is None or value is PydanticUndefined:
        return "not set"
    return _toml(value)


# --------------------------------------------------------------------------------------------
# Walking the schemas
# --------------------------------------------------------------------------------------------


def _describe_extras(model: type[BaseModel]) -> tuple[str, str, str] | None:
    """Placeholder, type and meaning of the free keys of a schema with ``extra="allow"``."""
    from sweep.planets import Prior
    from sweep.spec import InputsSection

    if model is InputsSection:
        return ("x<i>", "number or distribution",
                "Input x_i of the test function: x1, x2, x3 for ishigami, one per coefficient a_i "
                "for sobol-g. Usually uncertain; a grid is not allowed.")
    if model is Prior:
        return ("<argument>", "number or distribution",
                "Any other key is a keyword argument of the scipy.stats distribution (loc, scale or a "
                "shape parameter such as a, b, s). An uncertain argument is a hyperparameter: a factor "
                "of its own, named by its path.")
    return None


def _summary(model) -> str:
    """First paragraph of a schema's docstring, in Markdown."""
    doc = (model.__doc__ or "").strip()
    first = doc.split("\n\n")[0]
    return _markdown(" ".join(first.split()))


def _markdown(text: str) -> str:
    """reStructuredText of docstrings and descriptions, as Markdown."""
    text = re.sub(r":[a-z]+:`~?([^`]+)`", r"`\1`", text)
    return text.replace("``", "`")


def _placeholder(field_name: str, model: type[BaseModel]) -> str:
    if "name" in model.model_fields:
        return f"<{_singular(field_name)}>"
    return "<index>"


def _walk(model: type[BaseModel], prefix: str, walk: _Walk, discriminator: str | None = None) -> None:
    for name, info in model.model_fields.items():
        path = f"{prefix}.{name}"
        shape = _shape(info.annotation, info.metadata)
        description = _markdown(" ".join((info.description or "").split()))
        if not description:
            walk.undescribed.append(f"{model.__module__}.{model.__qualname__}.{name}")
            if name == discriminator:
                description = "Chooses this variant."
        unit = params.unit_from_key(name) if shape.numeric else ""
        walk.keys.append(Key(path, shape.type, unit, _default(info), "; ".join(shape.allowed), description))
        for suffix, child in shape.children:
            if suffix == "<item>":
                suffix = _placeholder(name, child)
            elif suffix == "<key>":
                suffix = f"<{_singular(name)}>"
            _walk(child, f"{path}.{suffix}" if suffix else path, walk)
    extras = _describe_extras(model) if model.model_config.get("extra") == "allow" else None
    if extras is not None:
        placeholder, kind, meaning = extras
        walk.keys.append(Key(f"{prefix}.{placeholder}", kind, "", "not set", "", meaning))
    elif model.model_config.get("extra") == "allow":
        walk.undescribed.append(f"{model.__module__}.{model.__qualname__}.<other keys>")
        walk.keys.append(Key(f"{prefix}.<key>", "any", "", "not set", "", ""))


def describe_schema(model: type[BaseModel], prefix: str,
                    discriminator: str | None = None) -> tuple[list[Key], list[str]]:
    """The keys of one schema, nested tables included, and its fields that lack a description.

    Parameters
    ----------
    model : pydantic model class
        The section's schema.
    prefix : str
        Key path of the section (``"run"``, ``"concepts.<concept>"``).
    discriminator : str, optional
        Name of the field that selects this variant of a union (``"kind"``).

    Returns
    -------
    keys : list of Key
        Depth first, fields in declaration order.
    undescribed : list of str
        ``module.Class.field`` of the fields without ``Field(description=...)``.
    """
    walk = _Walk()
    _walk(model, prefix, walk, discriminator)
    return walk.keys, walk.undescribed


def _variants(union) -> list[type[BaseModel]]:
    tp, _ = _peel(union)
    return list(_union_args(tp) or (tp,))


def sections() -> tuple[list[Section], list[str]]:
    """Every section of a sweep definition, and the schema fields that lack a description.

    Returns
    -------
    sections : list of Section
        In the order of a sweep definition; sections with variants give one table per variant.
    undescribed : list of str
        ``module.Class.field`` of every field without ``Field(description=...)``.
    """
    from sweep import concepts, spec
    from sweep.catalogs import StarsSection
    from sweep.occurrence import OccurrenceSection
    from sweep.planets import PriorsSection
    from sweep.tally import CategoriesSection

    plan: list[tuple[str, str, type[BaseModel], str | None]] = [
        ("[run]", "run", spec.RunSection, None)
    ]
    plan += [(f'[model] kind = "{_kind_of(m)}"', "model", m, "kind") for m in _variants(spec.ModelSection)]
    plan += [
        ("[inputs]", "inputs", spec.InputsSection, None),
        ("[execution]", "execution", spec.ExecutionSection, None),
        ("[stars]", "stars", StarsSection, None),
    ]
    plan += [(f'[occurrence] kind = "{_kind_of(m)}"', "occurrence", m, "kind")
             for m in _variants(OccurrenceSection)]
    plan.append(("[priors]", "priors", PriorsSection, None))
    plan += [(f'[[concepts]] kind = "{kind}"', "concepts.<concept>", concepts.concept_schema(kind), "kind")
             for kind in concepts.kinds()]
    plan.append(("[categories]", "categories", CategoriesSection, None))

    out, undescribed = [], []
    for title, prefix, model, discriminator in plan:
        keys, missing = describe_schema(model, prefix, discriminator)
        out.append(Section(title, _summary(model), keys))
        undescribed.extend(u for u in missing if u not in undescribed)
    return out, undescribed


def _kind_of(model: type[BaseModel]) -> str:
    tp, _ = _peel(model.model_fields["kind"].annotation)
    return typing.get_args(tp)[0]


def undescribed_fields() -> list[str]:
    """Schema fields (``module.Class.field``) that have no ``Field(description=...)``."""
    return sections()[1]


def unit_mismatches() -> list[str]:
    """Keys whose description ends in a bracketed unit that differs from the key suffix's unit.

    A key like ``zero_point_Jy`` described as "[Jy]" while :func:`sweep.params.unit_from_key`
    knows no ``_Jy`` suffix: the cube would label such a factor with unit "1".
    """
    found = []
    for section in sections()[0]:
        for key in section.keys:
            stated = [s for s in re.findall(r"\[([^\]]+)\]", key.description) if "," not in s]
            if key.unit and stated and stated[-1] != key.unit:
                found.append(f"{key.path}: unit {key.unit!r} from the key, [{stated[-1]}] in its description")
    return found


# --------------------------------------------------------------------------------------------
# Markdown
# --------------------------------------------------------------------------------------------

INTRO = f"""\
# Sweep definition: key reference

<!-- Generated from the pydantic schemas by `{REGENERATE}`; do not edit by hand. -->

A sweep definition is a TOML file. This page lists every key of every section, generated from the
schemas the code validates against, so it says exactly what `sweep plan` accepts. `sweep init
PATH` writes a commented starter that runs as it is.

## Sections

| section | for | |
|---|---|---|
| `[run]` | every sweep | name, row design (`saltelli` or `monte-carlo`), size, seed, store |
| `[model]` | every sweep | `kind = "planets"` (the default) or an analytic test function |
| `[execution]` | every sweep | defaults for `sweep run`; command-line options override them |
| `[inputs]` | test functions | their inputs `x1`, `x2`, ... |
| `[stars]` | planet-yield model | the star list: a file or an invented neighbourhood |
| `[occurrence]` | planet-yield model | occurrence rates and their uncertainty |
| `[priors]` | planet-yield model | planet-level priors (albedos, eccentricity) |
| `[[concepts]]` | planet-yield model | instrument concepts, one table each (at least one) |
| `[categories]` | planet-yield model | category axes and named criteria of the counts |

## Fixed, grid or uncertain

Any key whose type reads **{PARAM_TYPE}** (a *parameter*) can be written three ways:

```toml
aperture_diameter_m = 6.0                                          # fixed: one value
aperture_diameter_m = {{ grid = [4.0, 6.0, 8.0] }}                   # a grid axis: a dimension of the cube
contrast_floor = {{ dist = "loguniform", a = 1e-11, b = 1e-10 }}     # uncertain: a factor of the analysis
throughput = {{ dist = "uniform", loc = 0.1, scale = 0.2, group = "optics" }}   # a factor in a Sobol group
```

- **Fixed**: a number, in the unit of the key.
- **Grid**: `{{ grid = [...] }}`, distinct finite values (at least one). Every grid point is
  evaluated for every row; the cube gains an axis named by the key path. Grids are allowed for
  instrument parameters (`[[concepts]]`) only, not in `[stars]`, `[occurrence]` or `[priors]`
  (one planet population per row), nor for the inputs of a test function.
- **Uncertain**: `{{ dist = "<name>", ... }}` where `<name>` is a continuous distribution of
  `scipy.stats` (`uniform`, `loguniform`, `norm`, `lognorm`, `beta`, `truncnorm`...) and every
  other key but `group` is one of its keyword arguments (`loc`, `scale`, shape parameters), as
  scipy.stats names them. The parameter becomes a factor of the analysis named by its key path;
  its value in each row is the distribution's inverse CDF at that row's quantile. Factors with the
  same `group` are varied together and reported as one Sobol input.

The *allowed* column states a parameter's range as `> 0`, `>= 0` or `[0, 1]`; it must hold for
every value a grid or distribution can take (a distribution's whole support).

## Reading the tables

- **key**: the dotted key path. Items of lists of tables (`[[concepts]]`, `bands`, `criteria`)
  are named by their `name` key, as in factor names: `concepts.<concept>.bands.<band>.center_um`
  is `concepts.mirror.bands.V.center_um` for band `V` of concept `mirror`.
- **unit**: the unit named by the key's suffix (`_m` metres, `_um` micrometres, `_K` kelvin,
  `_pc` parsecs, `_uJy` microjansky, `_lod` lambda/D, `_rearth` Earth radii, `_d` days, `_ms` m/s
  ...; "1" for a dimensionless number). Units stated in brackets in a description are those of the
  values the key takes.
- **default**: the value used when the key is left out; *required* keys have none, *not set*
  means the feature is off unless given.
- Relative file paths resolve against the folder of the sweep definition.

Concept kinds other than the built-in ones below can be added as plug-ins
(`kind = "module:Class"`, see `sweep.concepts`); their keys are those of their own schema.
"""


def _cell(text: str) -> str:
    """A table cell: one line, pipes escaped, nothing a Markdown renderer would take for HTML."""
    text = " ".join(str(text).split()).replace("|", "\\|")
    return re.sub(r"<(?=[A-Za-z/!?])", "&lt;", text) or "—"


def _code(text: str) -> str:
    return f"`{text}`" if text and text not in ("required", "not set") else _cell(text)


def render() -> str:
    """The Markdown text of ``docs/reference.md``."""
    found, _ = sections()
    lines = [INTRO]
    for section in found:
        lines.append(f"## `{section.title}`\n")
        if section.summary:
            lines.append(re.sub(r"<(?=[A-Za-z/!?])", "&lt;", section.summary) + "\n")
        lines.append("| key | type | unit | default | allowed | description |")
        lines.append("|---|---|---|---|---|---|")
        for key in section.keys:
            lines.append("| " + " | ".join([
                f"`{key.path}`", _cell(key.type), _cell(key.unit), _code(key.default),
                _cell(key.allowed), _cell(key.description),
            ]) + " |")
        lines.append("")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    """``python -m sweep.reference [--write [PATH]] [--check]``."""
    parser = argparse.ArgumentParser(
        prog="python -m sweep.reference",
        description="Print the key reference of sweep definitions (Markdown), generated from the schemas.",
    )
    parser.add_argument("--write", nargs="?", const=str(REFERENCE_PATH), metavar="PATH",
                        help=f"write it to PATH (default {REFERENCE_PATH}) instead of printing it")
    parser.add_argument("--undescribed", action="store_true",
                        help="list the schema fields without a description (and unit mismatches)")
    args = parser.parse_args(argv)
    if args.undescribed:
        for name in undescribed_fields():
            print(f"no description: {name}")
        for line in unit_mismatches():
            print(f"unit mismatch: {line}")
        return 0
    text = render()
    if args.write:
        target = Path(args.write)
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_text(text, encoding="utf-8")
        print(f"wrote {target}", file=sys.stderr)
    else:
        sys.stdout.write(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
