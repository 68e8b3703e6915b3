"""One line per mistake in a sweep definition: TOML syntax errors and pydantic validation errors.

A :class:`pydantic.ValidationError` becomes one line: its first error (an unknown key before a
missing one, since an unknown key is usually a misspelt required one), its location as a dotted
key path of the user's file (list items by their ``name``, union tags left out), and for an
unknown key the closest valid name (:func:`difflib.get_close_matches`).
"""

from __future__ import annotations

import difflib
import re
import tomllib
import types
import typing
from pathlib import Path
from typing import Annotated, Any, Union

from pydantic import BaseModel, Tag, TypeAdapter, ValidationError

from sweep.errors import UserInputError


def toml_message(path: Path, exc: tomllib.TOMLDecodeError) -> str:
    text = str(exc)
    found = re.search(r"\(at line (\d+), column (\d+)\)", text)
    lineno = getattr(exc, "lineno", None) or (int(found.group(1)) if found else None)
    colno = getattr(exc, "colno", None) or (int(found.group(2)) if found else None)
    message = getattr(exc, "msg", None) or re.sub(r"\s*\(at (line \d+, column \d+|end of document)\)", "", text)
    if lineno is None:
        return f"{path}: malformed TOML: {message}"
    return f"{path}:{lineno}: malformed TOML: {message} (column {colno})"


def suggest(word: str, choices, template: str = "{}") -> str:
    close = difflib.get_close_matches(str(word), [str(c) for c in choices], n=1)
    return f" (did you mean {template.format(close[0])}?)" if close else ""


def validate_with(schema, data):
    if isinstance(schema, TypeAdapter):
        return schema.validate_python(data)
    return schema.model_validate(data)


def validate(schema, data, prefix: str, path: Path):
    try:
        return validate_with(schema, data)
    except ValidationError as exc:
        root = schema._type if isinstance(schema, TypeAdapter) else schema
        raise UserInputError(validation_message(exc, data, prefix, path, root)) from None


_PARAM_TAGS = ("fixed", "grid", "dist")


def _display_path(loc: tuple, data: Any, prefix: str) -> str:
    """Dotted key path of an error location: list items by their name, union tags left out."""
    parts = [prefix] if prefix else []
    current = data
    for position, element in enumerate(loc):
        last = position == len(loc) - 1
        if isinstance(current, list) and isinstance(element, int) and 0 <= element < len(current):
            current = current[element]
            name = current.get("name") if isinstance(current, dict) else None
            parts.append(str(name) if isinstance(name, str) and name else str(element))
        elif isinstance(current, dict) and element in _PARAM_TAGS and ("grid" in current or "dist" in current) \
                and not getattr(current, "_tag_used", False):
            current = _TagUsed(current)  # the tag of a parameter's form, not a key
        elif isinstance(current, dict) and element in current:
            current = current[element]
            parts.append(str(element))
        elif not isinstance(current, (dict, list)) and element in _PARAM_TAGS:
            continue
        elif last:
            parts.append(str(element))
        # else: a union member's tag, not a key of the user's file
    return ".".join(parts) or "(top level)"


class _TagUsed(dict):
    _tag_used = True


def _unwrap(tp, tag=None) -> list:
    """Concrete candidate types behind Annotated/Union/Optional, with the union tag of each."""
    origin = typing.get_origin(tp)
    if origin is Annotated:
        args = typing.get_args(tp)
        tags = [m.tag for m in args[1:] if isinstance(m, Tag)]
        return _unwrap(args[0], tags[0] if tags else tag)
    if origin in (Union, types.UnionType):
        return [c for arg in typing.get_args(tp) for c in _unwrap(arg, tag)]
    return [(tp, tag)]


def _tags_of(model, tag) -> set:
    kind = model.model_fields.get("kind")
    found = {tag} if tag else set()
    if kind is not None:
        found |= {str(v) for v in typing.get_args(kind.annotation)} | {str(kind.default)}
    return found


def _extra_type(model):
    try:
        hint = typing.get_type_hints(model, include_extras=True).get("__pydantic_extra__")
    except Exception:  # unresolvable annotations: no suggestion, not an error
        return None
    args = typing.get_args(hint) if hint is not None else ()
    return args[1] if len(args) == 2 else None


def _field_names(root, loc: tuple) -> list[str]:
    """Valid keys of the table where an unknown key sits (best effort, for suggestions)."""
    candidates = _unwrap(root)
    for element in loc:
        step = []
        for tp, tag in candidates:
            origin = typing.get_origin(tp)
            if isinstance(tp, type) and issubclass(tp, BaseModel):
                if isinstance(element, str) and element in _tags_of(tp, tag):
                    step.append((tp, None))  # the union's tag, consumed once
                elif element in tp.model_fields:
                    step.extend(_unwrap(tp.model_fields[element].annotation))
                elif _extra_type(tp) is not None:
                    step.extend(_unwrap(_extra_type(tp)))
            elif origin in (list, tuple) and isinstance(element, int):
                step.extend(_unwrap(typing.get_args(tp)[0]))
            elif origin is dict and isinstance(element, str):
                step.extend(_unwrap(typing.get_args(tp)[1]))
        candidates = step
    names = []
    for tp, _ in candidates:
        if isinstance(tp, type) and issubclass(tp, BaseModel):
            names.extend(tp.model_fields)
    return list(dict.fromkeys(names))


def _find_model(title: str):
    """A pydantic model class of ``sweep`` by name (for suggestions when only the title is known)."""
    todo = list(BaseModel.__subclasses__())
    while todo:
        cls = todo.pop()
        if cls.__name__ == title and cls.__module__.startswith("sweep"):
            return cls
        todo.extend(cls.__subclasses__())
    return None


def validation_message(exc: ValidationError, data: Any, prefix: str, path: Path, root) -> str:
    """One line from a pydantic ValidationError: its first error, with the dotted key path."""
    errors = exc.errors(include_url=False)
    # an unknown key is usually a misspelt required one: report it rather than the "missing"
    error = next((e for e in errors if e["type"] == "extra_forbidden"), errors[0])
    loc = tuple(error["loc"])
    key = _display_path(loc, data, prefix)
    kind = error["type"]
    message = error["msg"]
    if message.startswith("Value error, "):
        message = message[len("Value error, "):]
    if kind == "extra_forbidden":
        root = root if root is not None else _find_model(exc.title)
        valid = _field_names(root, loc[:-1]) if root is not None else []
        hint = suggest(loc[-1], valid)
        allowed = f"; allowed: {', '.join(valid)}" if valid else ""
        return f"{path}: {key}: unknown key{hint}{allowed}"
    if kind == "union_tag_invalid":
        ctx = error.get("ctx") or {}
        expected = [t.strip(" '") for t in str(ctx.get("expected_tags", "")).split(",") if t.strip()]
        discriminator = str(ctx.get("discriminator", "kind")).strip("'")
        hint = suggest(ctx.get("tag"), expected, "'{}'")
        return (f"{path}: {key}.{discriminator}: unknown {discriminator} {ctx.get('tag')!r}{hint}; "
                f"allowed: {', '.join(expected)}")
    if kind == "union_tag_not_found":
        ctx = error.get("ctx") or {}
        return f"{path}: {key}.{str(ctx.get('discriminator', 'kind')).strip(chr(39))}: missing (required)"
    if kind == "too_short":
        needed = (error.get("ctx") or {}).get("min_length", 1)
        return f"{path}: {key}: empty; give at least {needed} value{'s' if needed != 1 else ''}"
    if kind == "missing":
        return f"{path}: {key}: missing (required)"
    given = error.get("input")
    if not isinstance(given, (dict, list)) and kind not in ("value_error", "assertion_error"):
        return f"{path}: {key}: {message} (got {given!r})"
    return f"{path}: {key}: {message}"
