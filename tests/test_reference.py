"""The key reference: generated from the schemas, complete, and never out of date."""

import re
from pathlib import Path
from typing import Literal

import pytest
from pydantic import BaseModel, ConfigDict, Field

from sweep import params, reference
from sweep.reference import PARAM_TYPE, describe_schema, render

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def text():
    return render()


def test_docs_reference_matches_the_schemas(text):
    path = REPO / reference.REFERENCE_PATH
    assert path.is_file(), f"{path} is missing; generate it with `{reference.REGENERATE}` in {REPO}"
    assert path.read_text(encoding="utf-8") == text, (
        f"{reference.REFERENCE_PATH} is out of date with the pydantic schemas; regenerate it with "
        f"`{reference.REGENERATE}` (run in {REPO}) and commit the result"
    )


def _row(text: str, key: str) -> list[str]:
    for line in text.splitlines():
        if line.startswith(f"| `{key}` |"):
            return [cell.strip() for cell in line.strip("|").split(" | ")]
    raise AssertionError(f"no row for {key}")


def test_every_section_and_concept_kind_has_a_table(text):
    from sweep.concepts import kinds

    for title in ("[run]", '[model] kind = "planets"', '[model] kind = "ishigami"', '[model] kind = "sobol-g"',
                  "[inputs]", "[execution]", "[stars]", '[occurrence] kind = "power-law"',
                  '[occurrence] kind = "binned"', "[priors]", "[categories]"):
        assert f"## `{title}`" in text
    for kind in kinds():
        assert f'## `[[concepts]] kind = "{kind}"`' in text


def test_every_field_of_the_top_level_schemas_is_listed(text):
    from sweep.catalogs import StarsSection
    from sweep.planets import PriorsSection
    from sweep.spec import ExecutionSection, RunSection
    from sweep.tally import CategoriesSection

    for prefix, schema in (("run", RunSection), ("execution", ExecutionSection), ("stars", StarsSection),
                           ("priors", PriorsSection), ("categories", CategoriesSection)):
        for name in schema.model_fields:
            _row(text, f"{prefix}.{name}")


def test_rows_say_type_range_unit_default_and_choices(text):
    # parameters: the three forms and their range constraint
    assert _row(text, "concepts.<concept>.throughput")[1:5] == [PARAM_TYPE, "1", "required", "[0, 1]"]
    assert _row(text, "concepts.<concept>.aperture_diameter_m")[1:5] == [PARAM_TYPE, "m", "required", "> 0"]
    assert _row(text, "concepts.<concept>.bands.<band>.center_um")[2] == "um"
    # plain numbers: unit from the key's suffix, default as TOML, bounds
    assert _row(text, "stars.synthetic.radius_pc")[1:5] == ["number", "pc", "required", "> 0"]
    assert _row(text, "execution.workers")[1:5] == ["integer", "—", "`0`", ">= 0"]
    assert _row(text, "occurrence.period_d")[1:4] == ["[number, number]", "d", "`[10.0, 640.0]`"]
    # choices of a Literal, and a nested union (a prior or a word)
    assert _row(text, "occurrence.uncertainty")[4] == '"shared", "independent", "none"'
    assert _row(text, "priors.geometric_albedo")[1] == "table or string"
    assert _row(text, "priors.bond_albedo.<argument>")[1] == "number or distribution"
    # lists of named tables are keyed by the item's name; descriptions come from Field(description=)
    assert "Band centre wavelength" in _row(text, "concepts.<concept>.bands.<band>.center_um")[5]
    assert _row(text, "categories.criteria.<criterion>.habitable_zone")[4] == '"conservative", "optimistic"'


class _Band(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: str = Field(description="Label.")
    gain: params.NonNegativeParam = Field(default=1.0, description="Gain [1].")


class _Toy(BaseModel):
    """A toy schema for the generator."""

    model_config = ConfigDict(extra="forbid")
    kind: Literal["toy"]
    length_m: params.PositiveParam = Field(description="A length [m].")
    share: params.FractionParam | None = Field(default=None, description="A share [1].")
    plain: params.Param = 2.5
    bands: list[_Band] = Field(min_length=1, description="Bands.")
    weights: dict[Literal["A", "B"], float] = Field(default_factory=dict, description="Weights.")
    steps: int = Field(default=3, ge=1, le=9, description="Steps.")


def test_generator_on_a_toy_schema():
    keys, undescribed = describe_schema(_Toy, "toy", discriminator="kind")
    rows = {key.path: key for key in keys}
    assert list(rows) == ["toy.kind", "toy.length_m", "toy.share", "toy.plain", "toy.bands",
                          "toy.bands.<band>.name", "toy.bands.<band>.gain", "toy.weights", "toy.steps"]
    assert (rows["toy.length_m"].type, rows["toy.length_m"].unit, rows["toy.length_m"].allowed) == (
        PARAM_TYPE, "m", "> 0")
    assert (rows["toy.share"].allowed, rows["toy.share"].default) == ("[0, 1]", "not set")
    assert (rows["toy.bands.<band>.gain"].allowed, rows["toy.bands.<band>.gain"].default) == (">= 0", "1.0")
    assert rows["toy.plain"].allowed == "" and rows["toy.plain"].default == "2.5"
    assert rows["toy.bands"].allowed == "at least 1 item"
    assert rows["toy.weights"].allowed == "keys A, B" and rows["toy.weights"].default == "{}"
    assert rows["toy.steps"].allowed == ">= 1; <= 9"
    assert rows["toy.kind"].allowed == '"toy"' and rows["toy.kind"].description == "Chooses this variant."
    # the fields without a description are reported by module.Class.field
    assert undescribed == [f"{__name__}._Toy.kind", f"{__name__}._Toy.plain"]


def test_undescribed_fields_are_named_by_class():
    names = reference.undescribed_fields()
    assert all(name.startswith("sweep.") and name.count(".") >= 2 for name in names)


def test_main_writes_and_prints_the_same_text(tmp_path, capsys, text):
    target = tmp_path / "docs" / "reference.md"
    assert reference.main(["--write", str(target)]) == 0
    assert target.read_text(encoding="utf-8") == text
    assert reference.main([]) == 0
    assert capsys.readouterr().out == text


def test_markdown_cells_stay_in_their_column(text):
    # a "|" or an HTML-like "<name>" outside code would break a row or hide part of a cell
    rows, in_table = 0, False
    for line in text.splitlines():
        if line.startswith("| key | type | unit |"):
            in_table = True
        elif not line.startswith("|"):
            in_table = False
        elif in_table:
            rows += 1
            assert line.replace("\\|", "").count("|") == 7, line
            outside_code = re.sub(r"`[^`]*`", "", line)
            assert not re.search(r"<[A-Za-z/]", outside_code), line
    assert rows > 50
