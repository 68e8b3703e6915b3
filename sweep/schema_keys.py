"""The keys of a sweep definition, read from the pydantic schemas that validate it.

Every section schema (the ones in :mod:`sweep.spec` and those the model modules own) is walked
field by field, nested tables, lists of tables and discriminated unions included. Each key is
described by its dotted path, type, unit (from the key's suffix, :func:`sweep.params.unit_from_key`),
default, allowed values and the description written in its ``Field``. :mod:`sweep.reference`
renders the result as ``docs/reference.md``.
"""

from __future__ import annotations

import math
import re
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

__all__ = [
    "PARAM_TYPE",
    "Key",
    "Section",
    "describe_schema",
    "sections",
    "undescribed_fields",
    "unit_mismatches",
]

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


#: Bounds as annotated-types writes them: the attribute holding the number, and the sign shown.
_BOUNDS = {annotated_types.Gt: ("gt", ">"), annotated_types.Ge: ("ge", ">="),
           annotated_types.Lt: ("lt", "<"), annotated_types.Le: ("le", "<=")}
_BOUND_TYPES = tuple(_BOUNDS)


def _constraints(meta: list) -> list[str]:
    """Readable constraints from pydantic/annotated-types metadata."""
    out = []
    for item in meta:
        if isinstance(item, FieldInfo):
            out.extend(_constraints(item.metadata))
        elif isinstance(item, _BOUND_TYPES):
            attribute, sign = next(v for k, v in _BOUNDS.items() if isinstance(item, k))
            out.append(f"{sign} {_number(getattr(item, attribute))}")
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
