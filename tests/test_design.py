"""Rows: Saltelli blocks from one scrambled Sobol' sequence, Monte Carlo rows, blocks and seeds."""

from pathlib import Path

import numpy as np
import pytest
import scipy.stats
import scipy.stats.qmc

from sweep import streams
from sweep.blocks import RowBlock
from sweep.design import build_rows, design_generator, monte_carlo_rows, saltelli_rows
from sweep.params import Factor
from sweep.spec import parse_spec

from conftest import ISHIGAMI_MODEL

SPEC = """\
[run]
name = "g"
mode = "saltelli"
base_rows = 128
seed = 11
block_rows = 32

[model]
kind = "sobol-g"
a = [0.0, 1.0, 9.0, 99.0]

[inputs]
x1 = { dist = "norm", loc = 0.5, scale = 0.1 }
x2 = { dist = "beta", a = 2.0, b = 5.0, group = "pair" }
x3 = { dist = "loguniform", a = 0.01, b = 1.0, group = "pair" }
x4 = { dist = "uniform", loc = 0.0, scale = 1.0 }
"""

N = 128
K = 4


def spec_of(text=SPEC):
    return parse_spec(text, Path("design_test.toml"))


@pytest.fixture(scope="module")
def saltelli():
    spec = spec_of()
    return spec, build_rows(spec)


def test_saltelli_layout(saltelli):
    spec, rows = saltelli
    inputs = spec.sobol_inputs()
    assert inputs == ["inputs.x1", "pair", "inputs.x4"]
    assert rows.n_rows == N * (2 + len(inputs))  # Saltelli 2002: N (k + 2) rows
    labels = ["A", "B"] + [f"AB:{name}" for name in inputs]
    assert list(rows.block_label) == [label for label in labels for _ in range(N)]  # block-major
    assert np.array_equal(rows.base_index, np.tile(np.arange(N), len(labels)))
    assert rows.base_index.dtype == np.int64
    assert rows.population_source.dtype == np.int8
    assert np.array_equal(rows.population_source, np.repeat([0, 1, 0, 0, 0], N))
    assert rows.seed == 11


def test_ab_blocks_take_input_j_from_b(saltelli):
    spec, rows = saltelli
    part = {label: rows.block_label == label for label in set(rows.block_label)}
    groups = {"inputs.x1": ["inputs.x1"], "pair": ["inputs.x2", "inputs.x3"], "inputs.x4": ["inputs.x4"]}
    for name, members in groups.items():
        for factor, values in rows.factor_values.items():
            source = "B" if factor in members else "A"  # Saltelli et al. 2010, AB_j construction
            assert np.array_equal(values[part[f"AB:{name}"]], values[part[source]]), (name, factor)
    for values in rows.factor_values.values():
        assert not np.array_equal(values[part["A"]], values[part["B"]])


def test_quantiles_are_those_of_scipy_sobol(saltelli):
    spec, rows = saltelli
    # reference: scipy.stats.qmc.Sobol itself, seeded with the design generator
    reference = scipy.stats.qmc.Sobol(d=2 * K, scramble=True, rng=design_generator(11)).random_base2(7)
    a, b = reference[:, :K], reference[:, K:]
    for j, factor in enumerate(spec.factors()):
        values = rows.factor_values[factor.name]
        np.testing.assert_allclose(factor.dist.cdf(values[:N]), a[:, j], rtol=0, atol=1e-9)
        np.testing.assert_allclose(factor.dist.cdf(values[N:2 * N]), b[:, j], rtol=0, atol=1e-9)


def test_values_lie_in_each_support(saltelli):
    spec, rows = saltelli
    for factor in spec.factors():
        low, high = factor.dist.support()
        values = rows.factor_values[factor.name]
        assert values.dtype == np.float64
        assert np.all(np.isfinite(values)) and np.all((values >= low) & (values <= high))


def test_sobol_points_are_balanced(saltelli):
    spec, rows = saltelli
    # a scrambled Sobol' base-2 net puts exactly N/2 points in each half of every axis (Owen 1998)
    x4 = rows.factor_values["inputs.x4"][:N]
    assert np.sum(x4 < 0.5) == N // 2


def test_same_seed_same_rows_other_seed_other_rows():
    one, two = build_rows(spec_of()), build_rows(spec_of())
    for name in one.factor_values:
        assert np.array_equal(one.factor_values[name], two.factor_values[name])
    other = build_rows(spec_of(SPEC.replace("seed = 11", "seed = 12")))
    assert not np.array_equal(other.factor_values["inputs.x1"], one.factor_values["inputs.x1"])


@pytest.mark.parametrize("block_rows", [7, 32, 1000])
def test_blocks_concatenate_to_the_table(saltelli, block_rows):
    _, rows = saltelli
    blocks = [rows.block(i, block_rows) for i in range(rows.n_blocks(block_rows))]
    assert all(isinstance(block, RowBlock) for block in blocks)
    assert [b.index for b in blocks] == list(range(len(blocks)))
    assert blocks[0].start == 0 and blocks[-1].stop == rows.n_rows
    assert all(len(b) == min(block_rows, rows.n_rows - b.start) for b in blocks)
    assert all(b.seed == 11 for b in blocks)
    assert np.array_equal(np.concatenate([b.base_index for b in blocks]), rows.base_index)
    assert np.array_equal(np.concatenate([b.population_source for b in blocks]), rows.population_source)
    for name, values in rows.factor_values.items():
        assert np.array_equal(np.concatenate([b.factors[name] for b in blocks]), values)
    with pytest.raises(IndexError):
        rows.block(len(blocks), block_rows)


def test_population_is_an_input_of_its_own():
    factors = [Factor("priors.albedo", scipy.stats.uniform(0.1, 0.5)),
               Factor("occurrence.q", scipy.stats.uniform(), group="rates")]
    rows = saltelli_rows(factors, ["priors.albedo", "rates", "population"], 16, seed=3)
    assert np.array_equal(rows.population_source, np.repeat([0, 1, 0, 0, 1], 16))  # A, B, AB:.., AB:population
    pop = rows.block_label == "AB:population"
    a = rows.block_label == "A"
    for values in rows.factor_values.values():
        assert np.array_equal(values[pop], values[a])  # every factor keeps A's value


def test_population_only_design():
    rows = saltelli_rows([], ["population"], 8, seed=1)
    assert rows.n_rows == 24 and rows.factor_values == {}
    assert np.array_equal(rows.population_source, np.repeat([0, 1, 1], 8))


def test_monte_carlo_rows_do_not_depend_on_blocks_or_length():
    factors = [Factor("a", scipy.stats.norm()), Factor("b", scipy.stats.loguniform(1e-3, 1.0))]
    rows = monte_carlo_rows(factors, 100, seed=5)
    assert set(rows.block_label) == {"MC"}
    assert np.array_equal(rows.base_index, np.arange(100))
    assert not rows.population_source.any()
    joined = [rows.block(i, 7) for i in range(rows.n_blocks(7))]
    for name in ("a", "b"):
        assert np.array_equal(np.concatenate([b.factors[name] for b in joined]), rows.factor_values[name])
    longer = monte_carlo_rows(factors, 150, seed=5)  # row i depends on (seed, i) only
    for name in ("a", "b"):
        assert np.array_equal(longer.factor_values[name][:100], rows.factor_values[name])


def test_monte_carlo_quantiles_come_from_the_design_stream():
    factors = [Factor("u", scipy.stats.uniform())]
    rows = monte_carlo_rows(factors, 50, seed=9)
    generator = np.random.Generator(np.random.PCG64(np.random.SeedSequence(9, spawn_key=(streams.DESIGN,))))
    np.testing.assert_array_equal(rows.factor_values["u"], generator.random((50, 1))[:, 0])


def test_monte_carlo_values_follow_the_prior():
    factors = [Factor("u", scipy.stats.uniform(2.0, 3.0))]
    values = monte_carlo_rows(factors, 4000, seed=2).factor_values["u"]
    assert np.all((values >= 2.0) & (values <= 5.0))
    standard_error = 3.0 / np.sqrt(12) / np.sqrt(values.size)  # sd of U(2, 5) is 3 / sqrt(12)
    assert abs(values.mean() - 3.5) < 4 * standard_error


def test_monte_carlo_spec():
    text = SPEC.replace('mode = "saltelli"', 'mode = "monte-carlo"').replace("base_rows = 128", "rows = 50")
    rows = build_rows(spec_of(text))
    assert rows.n_rows == 50 and set(rows.factor_values) == {f"inputs.x{i}" for i in range(1, 5)}


def test_ishigami_total_indices_from_the_design():
    """End to end through the design: Jansen's estimator on A and AB_j recovers the exact totals."""
    spec = spec_of('[run]\nname = "i"\nmode = "saltelli"\nbase_rows = 4096\nseed = 1990\n' + ISHIGAMI_MODEL)
    rows = build_rows(spec)
    model = spec.build_model()
    y = model.evaluate(rows.block(0, rows.n_rows))["y"]
    f_a, f_b = y[:4096], y[4096:8192]
    variance = np.var(np.concatenate([f_a, f_b]))
    for j in range(3):
        f_ab = y[(2 + j) * 4096:(3 + j) * 4096]
        terms = 0.5 * (f_a - f_ab) ** 2  # Jansen 1999, Saltelli et al. 2010 table 2 (f)
        total = terms.mean() / variance
        standard_error = terms.std() / np.sqrt(terms.size) / variance
        assert abs(total - model.total_order()[j]) < 4 * standard_error
