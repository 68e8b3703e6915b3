"""The sweep definition: a TOML file read once, checked once, and passed on as a :class:`Spec`.

A sweep definition has these sections (DEVELOPERS.md, "Contracts between modules")::

    [run]         name, mode ("monte-carlo" or "saltelli"), rows or base_rows, seed, block_rows, output
    [model]       kind = "planets" (default), "ishigami" or "sobol-g"
    [inputs]      test functions only: x1, x2, ... as parameters (usually uncertain)
    [execution]   workers, threads_per_worker, max_retries, dashboard_address
    [stars] [occurrence] [priors] [[concepts]] [categories]   the planet-yield model only

Every numeric parameter is fixed, gridded or uncertain (:mod:`sweep.params`). Every mistake raises
:class:`~sweep.errors.UserInputError` with one line naming the file and the key path (and the
TOML line when the parser gives one). Nothing downstream re-reads the TOML.
"""

from __future__ import annotations

import functools
import hashlib
import json
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any, Literal, Union

from pydantic import BaseModel, ConfigDict, Field, TypeAdapter, ValidationError

from sweep import params
from sweep import spec_messages as messages
from sweep.errors import UserInputError

#: Sections of a sweep definition, in the order their parameters are listed.
SECTIONS = ("run", "model", "inputs", "execution", "stars", "occurrence", "priors", "concepts", "categories")
#: Sections of the planet-yield model (absent for test functions).
PLANET_SECTIONS = ("stars", "occurrence", "priors", "concepts", "categories")
#: Name of the population draw as an analysis input.
POPULATION = "population"


# --------------------------------------------------------------------------------------------
# Schemas owned by this module
# --------------------------------------------------------------------------------------------


class RunSection(BaseModel):
    """``[run]``: what to compute and where to store it."""

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)

    name: str = Field(pattern=r"^[A-Za-z0-9_.-]+$", description="Name of the sweep ([A-Za-z0-9_.-]+).")
    mode: Literal["monte-carlo", "saltelli"] = Field(description="Design of the rows.")
    base_rows: int | None = Field(default=None, ge=2, description="Saltelli base size N (a power of two).")
    rows: int | None = Field(default=None, ge=1, description="Monte Carlo: number of rows.")
    seed: int = Field(ge=0, description="Seed of every random number of the sweep.")
    block_rows: int = Field(default=64, ge=1, description="Rows per task and per zarr chunk.")
    output: str | None = Field(default=None, description="Store path; default results/<name>.zarr.")


class PlanetsModelSection(BaseModel):
    """``[model] kind = "planets"``: the planet-yield model (the default)."""

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)

    kind: Literal["planets"] = "planets"


class IshigamiSection(BaseModel):
    """``[model] kind = "ishigami"``: y = sin x1 + a sin^2 x2 + b x3^4 sin x1 (Ishigami & Homma 1990)."""

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)

    kind: Literal["ishigami"]
    a: float = Field(default=7.0, allow_inf_nan=False, description="Coefficient of sin^2 x2.")
    b: float = Field(default=0.1, allow_inf_nan=False, description="Coefficient of x3^4 sin x1.")


class SobolGSection(BaseModel):
    """``[model] kind = "sobol-g"``: y = prod_i (|4 x_i - 2| + a_i) / (1 + a_i) (Saltelli & Sobol 1995)."""

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)

    kind: Literal["sobol-g"]
    a: list[Annotated[float, Field(ge=0.0, allow_inf_nan=False)]] = Field(
        min_length=1, description="One coefficient a_i >= 0 per input x_i."
    )


ModelSection = Annotated[
    Union[PlanetsModelSection, IshigamiSection, SobolGSection], Field(discriminator="kind")
]
_MODEL_ADAPTER = TypeAdapter(ModelSection)


class InputsSection(BaseModel):
    """``[inputs]``: the inputs x1, x2, ... of a test function, each a parameter."""

    model_config = ConfigDict(extra="allow", frozen=True)
    __pydantic_extra__: dict[str, params.Param]


class ExecutionSection(BaseModel):
    """``[execution]``: defaults for ``sweep run`` (command-line options override them)."""

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)

    workers: int = Field(default=0, ge=0, description="Worker processes; 0 = one per core.")
    threads_per_worker: int = Field(default=1, ge=1, description="Threads per worker process.")
    max_retries: int = Field(default=3, ge=0, description="Retries per block before the run stops.")
    dashboard_address: str = Field(default="127.0.0.1:0", description="Address of the dask dashboard.")


@dataclass(frozen=True)
class GridAxis:
    """A grid axis of the cube.

    Attributes
    ----------
    name : str
        Dotted path of the parameter (the cube dimension's name).
    values : tuple of float
        Values of the axis [unit].
    unit : str
        Unit of the values.
    """

    name: str
    values: tuple
    unit: str


# --------------------------------------------------------------------------------------------
# Spec
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Spec:
    """A validated sweep definition.

    Attributes
    ----------
    path : Path
        The TOML file.
    base_dir : Path
        Folder relative file paths of the spec resolve against (the file's folder).
    text : str
        Full text of the file.
    hash : str
        sha256 (hex) of the normalised validated spec (canonical JSON, sorted keys); comments,
        whitespace, key order, ``run.output`` and ``[execution]`` do not change it.
    run, model, execution : pydantic models
        The ``[run]``, ``[model]`` and ``[execution]`` sections.
    inputs : InputsSection or None
        ``[inputs]`` of a test function (None for the planet-yield model).
    stars, occurrence, priors, categories : pydantic models or None
        Sections of the planet-yield model (None for test functions).
    concepts : tuple of pydantic models
        The ``[[concepts]]`` of the planet-yield model (empty for test functions).
    """

    path: Path
    base_dir: Path
    text: str
    hash: str
    run: RunSection
    model: Any
    execution: ExecutionSection
    inputs: InputsSection | None = None
    stars: Any = None
    occurrence: Any = None
    priors: Any = None
    concepts: tuple = ()
    categories: Any = None

    # -- what kind of sweep -------------------------------------------------------------------

    @property
    def is_test_function(self) -> bool:
        """True for the analytic test functions (Ishigami, Sobol' G)."""
        return self.model.kind != "planets"

    @property
    def has_population(self) -> bool:
        """True when rows carry a population draw (the planet-yield model)."""
        return not self.is_test_function

    # -- parameters -----------------------------------------------------------------------------

    def _sections(self):
        if self.is_test_function:
            yield "inputs", self.inputs
            return
        yield "stars", self.stars
        yield "occurrence", self.occurrence
        yield "priors", self.priors
        for concept in self.concepts:
            yield f"concepts.{concept.name}", concept
        yield "categories", self.categories

    def parameter_sites(self) -> list[params.ParamSite]:
        """Every numeric parameter of the numeric sections, named by dotted path."""
        sites = []
        for prefix, section in self._sections():
            if section is not None:
                sites.extend(params.collect(section, prefix))
        return sites

    def factors(self) -> list[params.Factor]:
        """Uncertain inputs: explicit uncertain parameters and the occurrence model's implicit ones.

        Order: sections in :data:`SECTIONS` order, parameters in declaration order, the
        occurrence model's implicit factors right after the explicit ``occurrence`` parameters.
        Never includes the population draw.
        """
        return list(self._factor_list)

    @functools.cached_property
    def _factor_list(self) -> tuple:
        found = []
        for prefix, section in self._sections():
            if section is None:
                continue
            found.extend(site.factor() for site in params.collect(section, prefix) if site.is_factor)
            if prefix == "occurrence":
                from sweep.occurrence import build_occurrence

                found.extend(build_occurrence(section, self.base_dir).factors())
        return tuple(found)

    def sobol_inputs(self) -> list[str]:
        """Analysis inputs in AB-block order: each factor's group (once) or name, then "population"."""
        units = list(dict.fromkeys(factor.analysis_unit for factor in self.factors()))
        return units + [POPULATION] if self.has_population else units

    def grid_axes(self) -> list[GridAxis]:
        """Grid axes of the cube, in declaration order."""
        return [
            GridAxis(site.path, tuple(float(v) for v in site.param.grid), site.unit)
            for site in self.parameter_sites()
            if site.is_grid
        ]

    # -- rows and storage -------------------------------------------------------------------------

    @property
    def n_rows(self) -> int:
        """Total number of rows: ``rows`` (Monte Carlo) or ``N (2 + number of Sobol inputs)``."""
        if self.run.mode == "saltelli":
            return self.run.base_rows * (2 + len(self.sobol_inputs()))
        return self.run.rows

    @property
    def n_blocks(self) -> int:
        """Number of row blocks (tasks, zarr chunks along ``row``)."""
        return -(-self.n_rows // self.run.block_rows)

    def output_path(self, override: str | None = None) -> Path:
        """Store path: ``override``, else ``run.output``, else ``results/<name>.zarr`` (relative to cwd)."""
        return Path(override or self.run.output or f"results/{self.run.name}.zarr").expanduser()

    def build_model(self):
        """The :class:`~sweep.blocks.BlockModel` this sweep runs."""
        if self.is_test_function:
            from sweep import testfunctions

            names, constants = [], {}
            for site in params.collect(self.inputs, "inputs"):
                names.append(site.path)
                if not site.is_factor:
                    constants[site.path] = float(site.param)
            names.sort(key=lambda name: int(name.rsplit("x", 1)[1]))
            if self.model.kind == "ishigami":
                return testfunctions.IshigamiModel(self.model.a, self.model.b, tuple(names), constants)
            return testfunctions.SobolGModel(list(self.model.a), tuple(names), constants)
        from sweep.model import PlanetYieldModel

        return PlanetYieldModel(self)


# --------------------------------------------------------------------------------------------
# Loading
# --------------------------------------------------------------------------------------------


def load_spec(path) -> Spec:
    """Read and validate a sweep definition.

    Parameters
    ----------
    path : str or Path
        The TOML file.

    Raises
    ------
    UserInputError
        One line naming the file and the key path, for any mistake.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise UserInputError(f"{path}: no such sweep definition file") from None
    except IsADirectoryError:
        raise UserInputError(f"{path}: is a folder, not a sweep definition file (.toml)") from None
    except UnicodeDecodeError as exc:
        raise UserInputError(f"{path}: not a UTF-8 text file ({exc.reason})") from None
    return parse_spec(text, path)


def read_execution(path) -> ExecutionSection | None:
    """The ``[execution]`` section of a sweep definition alone, or None if it cannot be read.

    Cheap (TOML and one small schema), so that ``sweep run`` can start its workers while
    :func:`load_spec` validates the whole file; any mistake is left for :func:`load_spec` to report.
    """
    try:
        document = tomllib.loads(Path(path).read_text(encoding="utf-8"))
        return ExecutionSection.model_validate(document.get("execution", {}))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, ValidationError, AttributeError):
        return None


def parse_spec(text: str, path: Path) -> Spec:
    """Validate the text of a sweep definition that lives (or would live) at ``path``.

    Parameters
    ----------
    text : str
        TOML text.
    path : Path
        File the text comes from; names it in messages and sets ``base_dir``.
    """
    path = Path(path)
    base_dir = path.parent.resolve()
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise UserInputError(messages.toml_message(path, exc)) from None

    for key, value in raw.items():
        if key not in SECTIONS:
            raise UserInputError(f"{path}: [{key}]: unknown section{messages.suggest(key, SECTIONS, '[{}]')}; "
                                 f"allowed: {', '.join(SECTIONS)}")
        if key == "concepts":
            if not (isinstance(value, list) and all(isinstance(item, dict) for item in value)):
                raise UserInputError(f"{path}: concepts: must be an array of tables, written [[concepts]]")
        elif not isinstance(value, dict):
            raise UserInputError(f"{path}: {key}: must be a table, written [{key}]")
    if "run" not in raw:
        raise UserInputError(f"{path}: [run]: missing section (name, mode, seed, rows or base_rows)")

    run = messages.validate(RunSection, raw["run"], "run", path)
    raw_model = raw.get("model", {})
    if "kind" not in raw_model:
        raw_model = {"kind": "planets", **raw_model}
    model = messages.validate(_MODEL_ADAPTER, raw_model, "model", path)
    execution = messages.validate(ExecutionSection, raw.get("execution", {}), "execution", path)
    _check_run(run, path)

    sections: dict[str, Any] = {}
    if model.kind == "planets":
        if "inputs" in raw:
            raise UserInputError(f"{path}: [inputs]: only for test functions ([model] kind = "
                                 "\"ishigami\" or \"sobol-g\"); the planet-yield model takes its "
                                 "parameters from [stars], [occurrence], [priors], [[concepts]], [categories]")
        sections.update(_planet_sections(raw, path, base_dir))
    else:
        for key in PLANET_SECTIONS:
            if key in raw:
                raise UserInputError(f"{path}: [{key}]: not used by [model] kind = \"{model.kind}\"; "
                                     "a test function takes only [run], [model], [inputs], [execution]")
        sections["inputs"] = _test_inputs(raw.get("inputs"), model, path)

    normalised = {
        "run": run.model_dump(mode="json", exclude={"output"}),
        "model": model.model_dump(mode="json"),
    }
    for key, section in sections.items():
        if key == "concepts":
            normalised[key] = [concept.model_dump(mode="json") for concept in section]
        elif section is not None:
            normalised[key] = section.model_dump(mode="json")
    canonical = json.dumps(normalised, sort_keys=True, separators=(",", ":"), allow_nan=False)
    digest = hashlib.sha256(canonical.encode("utf-8")).hexdigest()

    spec = Spec(path=path, base_dir=base_dir, text=text, hash=digest, run=run, model=model,
                execution=execution, **sections)
    _check_factors(spec, path)
    return spec


def _check_run(run: RunSection, path: Path) -> None:
    if run.mode == "saltelli":
        if run.rows is not None:
            raise UserInputError(f"{path}: run.rows: not used in saltelli mode; give base_rows (N, a power "
                                 "of two; total rows = N (2 + number of Sobol inputs))")
        if run.base_rows is None:
            raise UserInputError(f"{path}: run.base_rows: missing; saltelli mode needs the base size N, "
                                 "a power of two such as 256")
        if run.base_rows & (run.base_rows - 1):
            lower = 1 << (run.base_rows.bit_length() - 1)
            raise UserInputError(f"{path}: run.base_rows: {run.base_rows} is not a power of two "
                                 f"(Sobol' sequences need one); try {lower} or {2 * lower}")
    else:
        if run.base_rows is not None:
            raise UserInputError(f"{path}: run.base_rows: only for saltelli mode; monte-carlo mode "
                                 "takes rows (the number of rows)")
        if run.rows is None:
            raise UserInputError(f"{path}: run.rows: missing; monte-carlo mode needs the number of rows")


def _test_inputs(raw_inputs, model, path: Path) -> InputsSection:
    expected = ["x1", "x2", "x3"] if model.kind == "ishigami" else [f"x{i + 1}" for i in range(len(model.a))]
    allowed = f"[model] kind = \"{model.kind}\" takes {', '.join(expected)}"
    if raw_inputs is None:
        raise UserInputError(f"{path}: [inputs]: missing section; {allowed}")
    for key in raw_inputs:
        if key not in expected:
            raise UserInputError(f"{path}: inputs.{key}: unknown input{messages.suggest(key, expected)}; {allowed}")
    for key in expected:
        if key not in raw_inputs:
            raise UserInputError(f"{path}: inputs.{key}: missing; {allowed}")
    inputs = messages.validate(InputsSection, raw_inputs, "inputs", path)
    for site in params.collect(inputs, "inputs"):
        if site.is_grid:
            raise UserInputError(f"{path}: {site.path}: a test function's input cannot be a grid "
                                 "axis; make it fixed (a number) or uncertain ({ dist = ... })")
    return inputs


def _planet_sections(raw: dict, path: Path, base_dir: Path) -> dict:
    """Validate the planet-model sections with the schemas their modules own.

    Each schema is imported just before its section is checked, so a mistake in an early section
    is reported whatever state a later module is in.
    """
    _check_concept_names(raw.get("concepts") or [], path)
    out: dict[str, Any] = {}
    for key in ("stars", "occurrence", "priors", "concepts", "categories"):
        if key == "concepts":
            out[key] = _concepts(raw.get("concepts"), path, base_dir)
            for concept in out[key]:
                _check_files(concept, f"concepts.{concept.name}", path, base_dir)
            continue
        out[key] = _section(raw, key, _schema(key), path)
        _check_files(out[key], key, path, base_dir)
    return out


def _schema(key: str):
    if key == "stars":
        from sweep.catalogs import StarsSection

        return StarsSection
    if key == "occurrence":
        from sweep.occurrence import OccurrenceSection

        return TypeAdapter(OccurrenceSection)
    if key == "priors":
        from sweep.planets import PriorsSection

        return PriorsSection
    from sweep.tally import CategoriesSection

    return CategoriesSection


def _check_concept_names(raw_list: list, path: Path) -> None:
    seen: dict[str, int] = {}
    for index, raw in enumerate(raw_list):
        name = raw.get("name")
        if not isinstance(name, str):
            continue
        if name in seen:
            raise UserInputError(f"{path}: concepts.{name}: duplicate concept name (concepts {seen[name] + 1} "
                                 f"and {index + 1} of [[concepts]]); give each concept its own name")
        seen[name] = index


def _section(raw: dict, key: str, schema, path: Path):
    if key in raw:
        return messages.validate(schema, raw[key], key, path)
    try:
        return messages.validate_with(schema, {})
    except ValidationError:
        raise UserInputError(f"{path}: [{key}]: missing section (required by the planet-yield model)") from None


def _concepts(raw_list, path: Path, base_dir: Path) -> tuple:
    from sweep.concepts import parse_concept

    if not raw_list:
        raise UserInputError(f"{path}: [[concepts]]: missing; the planet-yield model needs at least one concept")
    parsed = []
    for index, raw in enumerate(raw_list):
        name = raw.get("name")
        where = f"concepts.{name}" if isinstance(name, str) and name else f"concepts.{index}"
        try:
            parsed.append(parse_concept(raw, f"{path}: {where}", base_dir))
        except ValidationError as exc:  # a plug-in's own validator may let one through
            raise UserInputError(messages.validation_message(exc, raw, where, path, None)) from None
    return tuple(parsed)


def _check_files(section, prefix: str, path: Path, base_dir: Path) -> None:
    """Every field that names a file (``file``, ``path``, ``table``, ``*_file`` ...) must exist.

    Values starting with ``sweep:`` name packaged tables and are checked by their module.
    """
    if not isinstance(section, BaseModel):
        return
    for name in type(section).model_fields:
        value = getattr(section, name)
        key = f"{prefix}.{name}"
        if isinstance(value, BaseModel):
            _check_files(value, key, path, base_dir)
        elif isinstance(value, Path) or (isinstance(value, str) and _names_file(name)):
            if not str(value) or str(value).startswith("sweep:"):
                continue
            target = base_dir / Path(value).expanduser()
            if not target.is_file():
                raise UserInputError(f"{path}: {key}: file {str(value)!r} not found (looked for {target}; "
                                     "relative paths are relative to the sweep definition's folder)")


def _names_file(field: str) -> bool:
    return field in ("file", "path", "table") or field.endswith(("_file", "_path", "_table"))


def _check_factors(spec: Spec, path: Path) -> None:
    factors = spec.factors()
    names = [factor.name for factor in factors]
    ungrouped = {factor.name for factor in factors if factor.group is None}
    for factor in factors:
        if factor.group is not None and (factor.group in ungrouped or factor.group == POPULATION):
            raise UserInputError(f"{path}: {factor.name}.group: group name {factor.group!r} is already the "
                                 "name of a factor (or 'population'); choose another group name")
    if len(set(names)) != len(names):
        duplicate = next(name for name in names if names.count(name) > 1)
        raise UserInputError(f"{path}: {duplicate}: the same factor name appears twice")
    if spec.run.mode == "saltelli" and not spec.sobol_inputs():
        raise UserInputError(f"{path}: run.mode: saltelli mode needs at least one uncertain parameter "
                             "({ dist = ... }); none is declared")
