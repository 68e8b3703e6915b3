"""The key reference of sweep definitions, generated from the pydantic schemas.

The keys come from :mod:`sweep.schema_keys`, which walks every section schema; this module
renders them as Markdown tables. The result is ``docs/reference.md``; a test fails when the
schemas and that file drift apart. Regenerate with::

    python -m sweep.reference --write          # writes docs/reference.md
    python -m sweep.reference > docs/reference.md
"""

from __future__ import annotations

import argparse
import re
import sys
from pathlib import Path

from sweep.schema_keys import (  # noqa: F401  (re-exported: the reference's public names)
    PARAM_TYPE,
    Key,
    Section,
    describe_schema,
    sections,
    undescribed_fields,
    unit_mismatches,
)

#: Where the generated reference lives, relative to the repository root.
REFERENCE_PATH = Path("docs") / "reference.md"
#: The command that regenerates it (named in the file and in the drift test's message).
REGENERATE = "python -m sweep.reference --write"

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
