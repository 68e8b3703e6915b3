"""``sweep init``: the starter sweep definition runs as written, and nothing is overwritten by accident."""

import re
import tomllib

import numpy as np
import pytest

from sweep import cli
from sweep.commands.init import starter_text, write_starter
from sweep.design import build_rows
from sweep.errors import UserInputError
from sweep.spec import load_spec, parse_spec

KEY_LINE = re.compile(r"^\s*[A-Za-z_][A-Za-z0-9_]*\s*=")


def test_init_writes_a_starter_that_validates_and_runs(tmp_path, capsys):
    path = tmp_path / "study.toml"
    assert cli.main(["init", str(path)]) == 0
    printed = capsys.readouterr().out
    assert str(path) in printed
    assert f"sweep plan {path}" in printed and f"sweep run {path}" in printed

    spec = load_spec(path)
    assert spec.run.name == "study"  # named after the file, so its store is results/study.zarr
    assert spec.run.mode == "saltelli" and spec.model.kind == "planets"
    assert spec.stars.synthetic is not None and spec.stars.file is None  # runs without any file
    assert (spec.occurrence.kind, spec.occurrence.preset, spec.occurrence.uncertainty) == (
        "power-law", "sag13", "shared")
    assert sorted(concept.kind for concept in spec.concepts) == ["coronagraph", "interferometer"]
    factors = [factor.name for factor in spec.factors()]
    assert "occurrence.rates" in factors  # the shared occurrence-rate factor
    assert "priors.bond_albedo.loc" in factors  # the uncertain hyperparameter of the Bond albedo prior
    assert spec.sobol_inputs()[-1] == "population"
    assert [axis.name for axis in spec.grid_axes()] == ["concepts.mirror.aperture_diameter_m"]
    assert spec.categories.criteria and spec.categories.spectral_class

    model = spec.build_model()  # what `sweep plan` builds
    counts = model.evaluate(build_rows(spec).block(0, 4))
    assert counts["present"].shape[0] == 4
    # invented instruments with plausible numbers detect some planets in a few rows, not none
    assert counts["detected_any"].sum() > 0
    assert np.all(counts["detected_any"].sum(axis=tuple(range(3, counts["detected_any"].ndim)))
                  <= counts["present"].sum(axis=(1, 2, 3))[:, None, None])


def test_second_init_refuses_and_force_overwrites(tmp_path, capsys):
    path = tmp_path / "sweep.toml"
    path.write_text("# my own work\n")
    assert cli.main(["init", str(path)]) == 2
    error = capsys.readouterr().err
    assert "already exists" in error and "--force" in error and str(path) in error
    assert "\n" not in error.strip()  # one line, no traceback
    assert path.read_text() == "# my own work\n"  # untouched

    assert cli.main(["init", str(path), "--force"]) == 0
    assert path.read_text() == starter_text("sweep")
    with pytest.raises(UserInputError, match="already exists"):
        write_starter(path)


def test_init_refuses_a_folder_and_makes_missing_parents(tmp_path):
    with pytest.raises(UserInputError, match="is a folder"):
        write_starter(tmp_path, force=True)
    written = write_starter(tmp_path / "new" / "deeper" / "a.toml")
    assert written.is_file()


def test_stem_that_is_no_valid_name_keeps_the_template_name(tmp_path):
    spec = load_spec(write_starter(tmp_path / "my study.toml"))
    assert spec.run.name == "starter"


def test_every_key_of_the_starter_is_commented():
    lines = starter_text().splitlines()
    for index, line in enumerate(lines):
        if not KEY_LINE.match(line) or line.lstrip().startswith("#"):
            continue
        near = lines[max(index - 1, 0):index + 2]
        assert "#" in line or any(other.lstrip().startswith("#") for other in near), (
            f"starter.toml line {index + 1} has no comment: {line!r}")


def test_starter_says_its_stars_and_instruments_are_invented():
    text = starter_text()
    assert text.count("INVENTED") >= 2 and "invented" in text.lower().split("[run]")[0]


def test_commented_monte_carlo_alternative_is_valid(tmp_path):
    text = starter_text()
    text = text.replace('mode = "saltelli"', 'mode = "monte-carlo"')
    text = re.sub(r"^base_rows = .*$", "", text, flags=re.MULTILINE)
    text = re.sub(r"^# (rows = \d+)", r"\1", text, flags=re.MULTILINE)
    spec = parse_spec(text, tmp_path / "mc.toml")
    assert spec.run.mode == "monte-carlo" and spec.n_rows == 2000


def test_starter_is_plain_toml_with_the_documented_sections():
    raw = tomllib.loads(starter_text())
    assert list(raw) == ["run", "model", "stars", "occurrence", "priors", "concepts", "categories", "execution"]


def test_init_is_listed_in_the_command_help():
    assert "init" in cli.build_parser().format_help()
