"""The sweep definition: loading, one line per mistake, the hash, and the Spec's methods."""

import math
from pathlib import Path

import numpy as np
import pytest

from sweep import params
from sweep.errors import UserInputError
from sweep.spec import Spec, load_spec, parse_spec, read_execution
from sweep.testfunctions import IshigamiModel, SobolGModel

WORKFLOWS = Path(__file__).resolve().parents[1] / "workflows"

ISHIGAMI = """\
# an Ishigami sweep for the tests
[run]
name = "ishi"
mode = "saltelli"
base_rows = 64
seed = 7
block_rows = 16

[model]
kind = "ishigami"
a = 7.0
b = 0.1

[inputs]
x1 = { dist = "uniform", loc = -3.141592653589793, scale = 6.283185307179586 }
x2 = { dist = "uniform", loc = -3.141592653589793, scale = 6.283185307179586 }
x3 = { dist = "uniform", loc = -3.141592653589793, scale = 6.283185307179586 }

[execution]
workers = 2
"""

X3 = 'x3 = { dist = "uniform", loc = -3.141592653589793, scale = 6.283185307179586 }'
PLANET_RUN = '[run]\nname = "p"\nmode = "monte-carlo"\nrows = 10\nseed = 1\n'

PLANETS = """\
[run]
name = "neighbours"
mode = "saltelli"
base_rows = 16
seed = 1

[stars]
synthetic = { n = 20, radius_pc = 10.0, seed = 1 }   # an invented neighbourhood

[occurrence]
kind = "power-law"
preset = "sag13"

[priors]
bond_albedo = { dist = "uniform", loc = 0.1, scale = { dist = "uniform", loc = 0.3, scale = 0.2 } }

[[concepts]]
name = "mirror6"
kind = "coronagraph"
aperture_diameter_m = { grid = [4.0, 6.0] }
inner_working_angle_lod = 3.0
outer_working_angle_lod = 20.0
contrast_floor = { dist = "loguniform", a = 1e-11, b = 1e-10, group = "instrument" }
throughput = { dist = "uniform", loc = 0.1, scale = 0.2, group = "instrument" }
[[concepts.bands]]
name = "V"
center_um = 0.55
width_um = 0.1
flux_limit_uJy = 0.01

[categories]
radius_rearth = [0.5, 1.5, 4.0]
"""


def write(tmp_path, text, name="sweep.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def mistake(tmp_path, text):
    """The one-line message that loading ``text`` from a file gives."""
    path = write(tmp_path, text)
    with pytest.raises(UserInputError) as info:
        load_spec(path)
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith(str(path))
    return message


def test_ishigami_spec_loads(tmp_path):
    spec = load_spec(write(tmp_path, ISHIGAMI))
    assert isinstance(spec, Spec)
    assert spec.base_dir == tmp_path.resolve()
    assert spec.text == ISHIGAMI
    assert spec.run.name == "ishi" and spec.run.mode == "saltelli" and spec.run.base_rows == 64
    assert spec.model.kind == "ishigami" and spec.model.a == 7.0 and spec.model.b == 0.1
    assert spec.execution.workers == 2 and spec.execution.max_retries == 3  # default
    assert not spec.has_population
    assert spec.stars is None and spec.occurrence is None and spec.concepts == ()
    assert [f.name for f in spec.factors()] == ["inputs.x1", "inputs.x2", "inputs.x3"]
    assert spec.sobol_inputs() == ["inputs.x1", "inputs.x2", "inputs.x3"]
    assert spec.n_rows == 64 * (2 + 3)  # Saltelli 2002: N (k + 2) rows
    assert spec.n_blocks == 20
    assert spec.grid_axes() == []
    assert [site.path for site in spec.parameter_sites()] == ["inputs.x1", "inputs.x2", "inputs.x3"]
    x1 = spec.factors()[0]
    assert x1.dist.support() == pytest.approx((-math.pi, math.pi))  # scipy.stats.uniform(loc, scale)


def test_execution_section_read_alone_matches_the_whole_spec(tmp_path):
    path = write(tmp_path, ISHIGAMI)
    assert read_execution(path) == load_spec(path).execution and read_execution(path).workers == 2
    broken = write(tmp_path, ISHIGAMI.replace("[run]", "[run"))  # TOML syntax error
    assert read_execution(broken) is None
    assert read_execution(write(tmp_path, ISHIGAMI.replace("workers = 2", "workers = -1"))) is None
    assert read_execution(tmp_path / "absent.toml") is None  # load_spec reports these


def test_spec_is_frozen(tmp_path):
    spec = load_spec(write(tmp_path, ISHIGAMI))
    with pytest.raises(AttributeError):
        spec.run = None


def test_output_path(tmp_path):
    spec = load_spec(write(tmp_path, ISHIGAMI))
    assert spec.output_path() == Path("results/ishi.zarr")
    assert spec.output_path("elsewhere.zarr") == Path("elsewhere.zarr")
    spec = load_spec(write(tmp_path, ISHIGAMI.replace("block_rows = 16", 'block_rows = 16\noutput = "out/c.zarr"')))
    assert spec.output_path() == Path("out/c.zarr")


def test_build_model_ishigami(tmp_path):
    model = load_spec(write(tmp_path, ISHIGAMI)).build_model()
    assert isinstance(model, IshigamiModel)
    assert (model.a, model.b) == (7.0, 0.1)
    assert model.input_names == ("inputs.x1", "inputs.x2", "inputs.x3")


def test_fixed_input_is_a_constant_not_a_factor(tmp_path):
    spec = load_spec(write(tmp_path, ISHIGAMI.replace(X3, "x3 = 0.5")))
    assert spec.sobol_inputs() == ["inputs.x1", "inputs.x2"]
    assert spec.n_rows == 64 * 4
    assert spec.build_model().constants == {"inputs.x3": 0.5}


def test_monte_carlo_rows(tmp_path):
    text = ISHIGAMI.replace('mode = "saltelli"', 'mode = "monte-carlo"').replace("base_rows = 64", "rows = 100")
    spec = load_spec(write(tmp_path, text))
    assert spec.n_rows == 100
    assert spec.n_blocks == 7  # ceil(100 / 16)


def test_workflows_load():
    ishigami = load_spec(WORKFLOWS / "ishigami.toml")
    assert ishigami.run.mode == "saltelli"
    assert isinstance(ishigami.build_model(), IshigamiModel)
    sobol_g = load_spec(WORKFLOWS / "sobol_g.toml")
    assert sobol_g.run.mode == "saltelli"
    model = sobol_g.build_model()
    assert isinstance(model, SobolGModel)
    assert len(model.input_names) == len(sobol_g.model.a)
    assert "x3_x4" in sobol_g.sobol_inputs()  # a group is one analysis input
    assert len(sobol_g.sobol_inputs()) == len(sobol_g.factors()) - 1


# -- one line per mistake ---------------------------------------------------------------------


def test_malformed_toml_names_the_line(tmp_path):
    message = mistake(tmp_path, ISHIGAMI.replace('name = "ishi"', 'name = "ishi'))
    assert message.startswith(f"{tmp_path / 'sweep.toml'}:3:")  # the unterminated string is on line 3
    assert "malformed TOML" in message


@pytest.mark.parametrize("base,old,new,fragments", [
    pytest.param(ISHIGAMI, "seed = 7", "sede = 7", ["run.sede", "unknown key", "did you mean seed?"],
                 id="unknown-key-suggests-the-closest"),
    pytest.param(ISHIGAMI, X3, "x3 = { grid = [1.0], gird = 2 }", ["inputs.x3.gird", "did you mean grid?"],
                 id="unknown-key-inside-a-parameter"),
    pytest.param(ISHIGAMI, "[execution]", "[executon]", ["[executon]", "did you mean [execution]?"],
                 id="unknown-section-suggests-the-closest"),
    pytest.param(ISHIGAMI, "[run]", "[runs]", ["[runs]", "did you mean [run]?"], id="missing-run-section"),
    pytest.param(ISHIGAMI, 'kind = "ishigami"', 'kind = "ishigam"', ["model.kind", "'ishigami'"],
                 id="unknown-model-kind"),
    pytest.param(ISHIGAMI, "seed = 7", 'seed = "seven"', ["run.seed", "integer"], id="wrong-type"),
    pytest.param(ISHIGAMI, X3, 'x3 = "pi"', ["inputs.x3", "number"], id="wrong-type-of-parameter"),
    pytest.param(ISHIGAMI, X3, 'x3 = { dist = "unifrom" }', ["inputs.x3", "'unifrom'", "scipy.stats"],
                 id="unknown-distribution"),
    # scipy.stats.beta needs a > 0 and b > 0 (scipy documentation)
    pytest.param(ISHIGAMI, X3, 'x3 = { dist = "beta", a = -1.0, b = 2.0 }', ["inputs.x3", "beta"],
                 id="bad-distribution-arguments"),
    pytest.param(ISHIGAMI, X3, "x3 = { grid = [] }", ["inputs.x3.grid", "empty"], id="empty-grid"),
    pytest.param(ISHIGAMI, X3, "x3 = { grid = [0.0, 1.0] }", ["inputs.x3", "grid"],
                 id="grid-is-not-an-input-of-a-test-function"),
    pytest.param(ISHIGAMI, "base_rows = 64", "base_rows = 100", ["run.base_rows", "power of two", "64 or 128"],
                 id="base-rows-not-a-power-of-two"),
    pytest.param(ISHIGAMI, "base_rows = 64", "rows = 64", ["run.rows", "saltelli"], id="saltelli-needs-base-rows"),
    pytest.param(ISHIGAMI, 'mode = "saltelli"', 'mode = "monte-carlo"', ["run.base_rows"], id="monte-carlo-needs-rows"),
    pytest.param(ISHIGAMI, X3, "", ["inputs.x3", "missing"], id="missing-input"),
    pytest.param(ISHIGAMI, X3, X3 + "\nx4 = 1.0", ["inputs.x4", "x1, x2, x3"], id="unknown-input"),
    pytest.param(ISHIGAMI, 'kind = "ishigami"\na = 7.0\nb = 0.1', 'kind = "sobol-g"\na = [0.0, 1.0]',
                 ["inputs.x3", "x1, x2"], id="sobol-g-inputs-follow-a"),
    pytest.param(PLANETS, "throughput = {", "shade = 1.0\nthroughput = {", ["concepts.mirror6.shade"],
                 id="concept-mistake-names-the-file-and-key"),
    pytest.param(PLANETS, 'preset = "sag13"', 'preset = "sag13"\nspred = 2.0',
                 ["occurrence.spred", "did you mean spread?"], id="occurrence-unknown-key"),
    pytest.param(PLANETS, 'kind = "power-law"\npreset = "sag13"', 'kind = "binned"\ntable = "rates.ecsv"',
                 ["occurrence.table", "'rates.ecsv'"], id="missing-occurrence-table"),
])
def test_mistake_names_the_key(tmp_path, base, old, new, fragments):
    message = mistake(tmp_path, base.replace(old, new))
    for fragment in fragments:
        assert fragment in message


def test_planet_sections_not_allowed_with_a_test_function(tmp_path):
    message = mistake(tmp_path, ISHIGAMI + '\n[stars]\nfile = "stars.ecsv"\n')
    assert "[stars]" in message and "ishigami" in message


def test_missing_spec_file(tmp_path):
    with pytest.raises(UserInputError, match="no such sweep definition file"):
        load_spec(tmp_path / "absent.toml")


def test_missing_star_file(tmp_path):
    message = mistake(tmp_path, PLANET_RUN + '[stars]\nfile = "stars/nearby.ecsv"\n')
    assert "stars.file" in message and "'stars/nearby.ecsv'" in message and "not found" in message


def test_duplicate_concept_name(tmp_path):
    text = PLANET_RUN + '[[concepts]]\nname = "twin"\n[[concepts]]\nname = "twin"\n'
    message = mistake(tmp_path, text)
    assert "concepts.twin" in message and "duplicate concept name" in message


def test_parse_spec_names_the_given_path():
    with pytest.raises(UserInputError, match=r"^elsewhere/study\.toml: run\.seed"):
        parse_spec(ISHIGAMI.replace("seed = 7", "seed = -1"), Path("elsewhere/study.toml"))


# -- the hash ---------------------------------------------------------------------------------

REORDERED = """
[model]
b = 0.1     # coefficients first this time
kind   =   "ishigami"
a = 7.0

[inputs]
x3 = { scale = 6.283185307179586, dist = "uniform", loc = -3.141592653589793 }
x2 = { dist = "uniform", loc = -3.141592653589793, scale = 6.283185307179586 }
x1 = { loc = -3.141592653589793, dist = "uniform", scale = 6.283185307179586 }

[run]
block_rows = 16
seed = 7
base_rows = 64
mode = "saltelli"
name = "ishi"
"""


def test_hash_ignores_comments_whitespace_and_key_order(tmp_path):
    one = load_spec(write(tmp_path, ISHIGAMI, "one.toml"))
    two = load_spec(write(tmp_path, REORDERED, "two.toml"))
    assert len(one.hash) == 64 and int(one.hash, 16) >= 0  # sha256 hex
    assert one.text != two.text
    assert one.hash == two.hash


def test_hash_ignores_execution_and_output(tmp_path):
    one = load_spec(write(tmp_path, ISHIGAMI, "one.toml"))
    two = load_spec(write(tmp_path, ISHIGAMI.replace("workers = 2", "workers = 8")
                          .replace("block_rows = 16", 'block_rows = 16\noutput = "x.zarr"'), "two.toml"))
    assert one.hash == two.hash


@pytest.mark.parametrize("old,new", [
    ("seed = 7", "seed = 8"),
    ("b = 0.1", "b = 0.2"),
    ("block_rows = 16", "block_rows = 32"),
    (X3, X3.replace("uniform", "norm")),
])
def test_hash_changes_with_a_value(tmp_path, old, new):
    one = load_spec(write(tmp_path, ISHIGAMI, "one.toml"))
    two = load_spec(write(tmp_path, ISHIGAMI.replace(old, new), "two.toml"))
    assert one.hash != two.hash


# -- groups -------------------------------------------------------------------------------------


def test_groups_are_one_analysis_input(tmp_path):
    text = ISHIGAMI.replace('x2 = { dist = "uniform"', 'x2 = { group = "g", dist = "uniform"').replace(
        'x3 = { dist = "uniform"', 'x3 = { group = "g", dist = "uniform"')
    spec = load_spec(write(tmp_path, text))
    assert spec.sobol_inputs() == ["inputs.x1", "g"]
    assert [f.group for f in spec.factors()] == [None, "g", "g"]
    assert spec.n_rows == 64 * 4


def test_group_name_may_not_be_a_factor_name(tmp_path):
    text = ISHIGAMI.replace('x2 = { dist = "uniform"', 'x2 = { group = "inputs.x1", dist = "uniform"')
    message = mistake(tmp_path, text)
    assert "inputs.x2.group" in message


def test_parameter_sites_are_params_sites(tmp_path):
    spec = load_spec(write(tmp_path, ISHIGAMI.replace(X3, "x3 = 1.5")))
    sites = spec.parameter_sites()
    assert all(isinstance(site, params.ParamSite) for site in sites)
    assert [site.is_factor for site in sites] == [True, True, False]
    assert np.isclose(sites[2].param, 1.5)


# -- the planet-yield model's sections (schemas owned by their modules) -------------------------


def test_planet_spec_loads(tmp_path):
    spec = load_spec(write(tmp_path, PLANETS))
    assert spec.has_population and spec.model.kind == "planets"  # the default model
    assert spec.inputs is None
    assert [concept.name for concept in spec.concepts] == ["mirror6"]
    names = [factor.name for factor in spec.factors()]
    assert names[-3:] == ["priors.bond_albedo.scale", "concepts.mirror6.contrast_floor",
                          "concepts.mirror6.throughput"]
    assert len(names) > 3 and all(name.startswith("occurrence") for name in names[:-3])  # implicit ones
    inputs = spec.sobol_inputs()
    assert inputs[-2:] == ["instrument", "population"]
    assert "population" not in names
    assert spec.n_rows == 16 * (2 + len(inputs))
    assert spec.grid_axes() == [type(spec.grid_axes()[0])("concepts.mirror6.aperture_diameter_m", (4.0, 6.0), "m")]
    prefixes = {site.path.split(".")[0] for site in spec.parameter_sites()}
    assert prefixes == {"stars", "occurrence", "priors", "concepts", "categories"}


def test_planet_spec_without_optional_sections(tmp_path):
    text = PLANETS[:PLANETS.index("[priors]")] + PLANETS[PLANETS.index("[[concepts]]"):PLANETS.index("[categories]")]
    spec = load_spec(write(tmp_path, text))
    assert spec.priors is not None and spec.categories is not None  # their schemas' defaults


def test_planet_spec_needs_stars_and_concepts(tmp_path):
    message = mistake(tmp_path, PLANETS.replace(
        "[stars]\nsynthetic = { n = 20, radius_pc = 10.0, seed = 1 }   # an invented neighbourhood\n", ""))
    assert "[stars]" in message and "missing" in message
    message = mistake(tmp_path, PLANETS[:PLANETS.index("[[concepts]]")])
    assert "[[concepts]]" in message


def test_inputs_not_allowed_for_planets(tmp_path):
    message = mistake(tmp_path, PLANETS + "\n[inputs]\nx1 = 1.0\n")
    assert "[inputs]" in message
