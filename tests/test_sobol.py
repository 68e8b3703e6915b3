"""Sobol indices from a Saltelli cube (sweep.analysis.sobol) and what knowing a factor buys
(sweep.analysis.knowledge): analytic test functions, SALib as a reference, refusals."""

import json

import numpy as np
import pytest
import xarray as xr
from scipy.stats import qmc

from sweep.analysis.intervals import intervals
from sweep.analysis.knowledge import knowledge_value
from sweep.analysis.sobol import (
    convergence,
    irreducible_share,
    largest_complete_base_rows,
    sobol,
)
from sweep.cli import main
from sweep.errors import UserInputError


def saltelli_cube(m, names, func, low=0.0, high=1.0, seed=7, population=None):
    """A test-function cube in the contract's layout: rows A, B, AB:<input>..., block-major.

    ``population``: optional function (base_index, source) -> extra term, drawn per row from the
    population seed like the planet model's population draw (input "population", last).
    """
    n, d = 2 ** m, len(names)
    u = qmc.Sobol(d=2 * d, scramble=True, seed=np.random.default_rng(seed)).random_base2(m)
    A, B = low + (high - low) * u[:, :d], low + (high - low) * u[:, d:]
    inputs = list(names) + (["population"] if population else [])
    blocks, sources = [A, B], [0, 1]
    for j, name in enumerate(inputs):
        ab = A.copy()
        if j < d:
            ab[:, j] = B[:, j]
        blocks.append(ab)
        sources.append(1 if name == "population" else 0)
    X = np.concatenate(blocks)
    base = np.tile(np.arange(n), len(blocks))
    source = np.repeat(sources, n)
    y = func(X)
    if population:
        y = y + population(base, source)
    labels = np.repeat(["A", "B"] + [f"AB:{name}" for name in inputs], n)
    ds = xr.Dataset({"y": ("row", y, {"units": "1", "description": "test function"})},
                    coords={"block": ("row", labels), "base_index": ("row", base)}
                    | {f"inputs.{name}": ("row", X[:, j], {"units": "1"})
                       for j, name in enumerate(names)})
    ds.attrs = dict(mode="saltelli", base_rows=n, seed=seed, block_rows=n,
                    sobol_inputs=json.dumps(inputs), grid_axes="[]", spec_hash="0" * 64,
                    factors=json.dumps([{"name": f"inputs.{x}", "group": None, "unit": "1"}
                                        for x in names]))
    return ds


def ishigami(x, a=7.0, b=0.1):
    # Ishigami & Homma 1990, doi:10.1109/ISUMA.1990.151285
    return np.sin(x[:, 0]) + a * np.sin(x[:, 1]) ** 2 + b * x[:, 2] ** 4 * np.sin(x[:, 0])


G_A = np.array([0, 1, 4.5, 9, 99, 99, 99, 99])


def sobol_g(x):
    # Saltelli & Sobol 1995, doi:10.1016/0951-8320(95)00099-2
    return np.prod((np.abs(4 * x - 2) + G_A) / (1 + G_A), axis=1)


@pytest.fixture(scope="module")
def ishigami_result():
    ds = saltelli_cube(13, ["x1", "x2", "x3"], ishigami, -np.pi, np.pi)
    return ds, sobol(ds, n_resamples=999, seed=1)


def test_ishigami_indices_within_bootstrap_intervals(ishigami_result):
    _, res = ishigami_result
    # Ishigami & Homma 1990, a = 7, b = 0.1, values as tabulated in Saltelli et al. 2008, The Primer
    expected = {"S1": [0.3139, 0.4424, 0.0], "ST": [0.5576, 0.4424, 0.2437]}
    for index, values in expected.items():
        low = res["y_low"].sel(index=index).values
        high = res["y_high"].sel(index=index).values
        assert np.all(low <= values) and np.all(np.array(values) <= high), (index, low, high)
        # the intervals are informative, not just wide: half-widths below 0.05 at N = 2^13
        assert np.all(high - low < 0.1)
    assert list(res["factor"].values) == ["x1", "x2", "x3"]
    assert res.attrs["base_rows"] == 2 ** 13


def test_sobol_g_function_analytic_indices():
    ds = saltelli_cube(11, [f"x{i}" for i in range(1, 9)], sobol_g)
    res = sobol(ds, n_resamples=499, seed=2)
    # Saltelli & Sobol 1995: V_i = 1/(3 (1 + a_i)^2), V = prod(1 + V_i) - 1,
    # S_i = V_i / V, ST_i = V_i prod_{j != i}(1 + V_j) / V
    v = 1 / (3 * (1 + G_A) ** 2)
    total = np.prod(1 + v) - 1
    expected = {"S1": v / total, "ST": v * np.prod(1 + v) / (1 + v) / total}
    for index, values in expected.items():
        low = res["y_low"].sel(index=index).values
        high = res["y_high"].sel(index=index).values
        assert np.all((low <= values) & (values <= high)), (index, values, low, high)


def test_agrees_with_salib_on_the_same_evaluations(ishigami_result):
    from SALib.analyze import sobol as salib_sobol

    ds, res = ishigami_result
    n, d = 2 ** 13, 3
    y = ds["y"].values.reshape(d + 2, n)  # A, B, AB_1..AB_d
    # SALib's layout (calc_second_order=False): per base row, A, AB_1, ..., AB_d, B
    salib_y = np.concatenate([y[:1], y[2:], y[1:2]]).T.ravel()
    problem = {"num_vars": d, "names": ["x1", "x2", "x3"], "bounds": [[-np.pi, np.pi]] * d}
    ref = salib_sobol.analyze(problem, salib_y, calc_second_order=False, num_resamples=100,
                              seed=3)
    # SALib (reference library) uses the same estimators (Saltelli 2010 first order, Jansen
    # total) but centres and scales by all rows, not only A and B: agreement to well inside the
    # bootstrap half-width
    half = (res["y_high"] - res["y_low"]).values / 2
    assert np.all(np.abs(res["y"].sel(index="S1").values - ref["S1"]) < 0.1 * half[0])
    assert np.all(np.abs(res["y"].sel(index="ST").values - ref["ST"]) < 0.1 * half[1])


def test_outputs_are_vectorised_and_affine_invariant():
    ds = saltelli_cube(8, ["x1", "x2", "x3"], ishigami, -np.pi, np.pi)
    ds["z"] = 3.0 * ds["y"] - 5.0
    ds["z"].attrs["units"] = "1"
    ds["c"] = xr.zeros_like(ds["y"])
    both = sobol(ds, variables=["y", "z", "c"], n_resamples=99, seed=4)
    alone = sobol(ds, variables=["y"], n_resamples=99, seed=4)
    # Sobol indices are invariant under affine maps of the output (definition: ratios of variances)
    np.testing.assert_allclose(both["z"].values, both["y"].values, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(both["y"].values, alone["y"].values, rtol=1e-12)
    # a constant output has no variance to apportion: indices undefined, not zero
    assert np.all(np.isnan(both["c"].values))


def test_missing_block_refuses_with_a_clear_message():
    ds = saltelli_cube(6, ["x1", "x2", "x3"], ishigami, -np.pi, np.pi)
    mask = np.ones(ds.sizes["row"], bool)
    mask[4 * 64 + 40: 4 * 64 + 48] = False  # rows 40..47 of block AB:x3
    with pytest.raises(UserInputError, match=r"AB:x3.*base_rows=32"):
        sobol(ds, rows_complete=mask, n_resamples=0)
    assert largest_complete_base_rows(ds, mask) == 32
    part = sobol(ds, rows_complete=mask, base_rows=32, n_resamples=0)
    first = ds.isel(row=np.flatnonzero(ds["base_index"].values < 32))
    first.attrs["base_rows"] = 32
    np.testing.assert_allclose(part["y"].values, sobol(first, n_resamples=0)["y"].values)
    with pytest.raises(UserInputError, match="power of two"):
        sobol(ds, base_rows=48, n_resamples=0)


def test_monte_carlo_cube_is_refused():
    ds = xr.Dataset({"y": ("row", np.arange(16.0))},
                    coords={"block": ("row", np.full(16, "MC"))}, attrs={"mode": "monte-carlo"})
    with pytest.raises(UserInputError, match="saltelli"):
        sobol(ds)


def test_convergence_recomputes_on_leading_base_rows():
    ds = saltelli_cube(7, ["x1", "x2", "x3"], ishigami, -np.pi, np.pi)
    conv = convergence(ds, n_resamples=49)
    assert conv["base_rows"].values.tolist() == [16, 32, 64, 128]
    full = sobol(ds, n_resamples=49)
    np.testing.assert_allclose(conv["y"].sel(base_rows=128).values, full["y"].values)
    assert conv["y_low"].dims[0] == "base_rows"


def test_population_total_index_is_the_irreducible_share():
    noise_sd = 0.3

    def population(base, source):
        # a per-row population term keyed only by (base index, source block), like the model
        keyed = [np.random.default_rng([11, b, s]).normal(0, noise_sd) for b, s in zip(base, source)]
        return np.array(keyed)

    ds = saltelli_cube(10, ["x1"], lambda x: x[:, 0], population=population)
    res = sobol(ds, n_resamples=299, seed=5)
    share = irreducible_share(res, "y")
    # variance of x1 ~ U(0, 1) is 1/12 (from memory); the population term adds noise_sd^2
    expected = noise_sd ** 2 / (1 / 12 + noise_sd ** 2)
    assert float(share["low"]) <= expected <= float(share["high"])
    kv = knowledge_value(res, intervals(ds), level=0.95)
    assert kv["y_shrink"]["factor"].values.tolist() == ["x1"]  # the draw cannot be known


def test_knowing_a_factor_shrinks_the_spread_by_its_first_order_share():
    ds = saltelli_cube(12, ["x1", "x2"], lambda x: x[:, 0] + 2 * x[:, 1])
    res = sobol(ds, n_resamples=99, seed=6)
    kv = knowledge_value(res, intervals(ds), level=0.95)
    # y = x1 + 2 x2 with x_i ~ U(0, 1): knowing x2 leaves x1's spread, sd = sqrt(1/12)
    # (uniform variance from memory); tolerance covers the estimate of S1 at N = 2^12 (4 sigma)
    assert float(kv["y_sd_known"].sel(factor="x2")) == pytest.approx(np.sqrt(1 / 12), rel=0.03)
    assert float(kv["y_sd_known"].sel(factor="x1")) == pytest.approx(2 * np.sqrt(1 / 12), rel=0.03)
    s1 = res["y"].sel(index="S1")
    np.testing.assert_allclose(kv["y_shrink"].values, 1 - np.sqrt(1 - s1.values))
    np.testing.assert_allclose(kv["y_width_known"].values,
                               kv["y_width"].values * np.sqrt(1 - s1.values))


def test_sensitivity_command_json(monkeypatch, capsys):
    ds = saltelli_cube(8, ["x1", "x2", "x3"], ishigami, -np.pi, np.pi)
    monkeypatch.setattr("sweep.analysis.load_cube", lambda path: (ds, None))
    assert main(["sensitivity", "cube.zarr", "--json", "--resamples", "49"]) == 0
    records = json.loads(capsys.readouterr().out)
    assert [r["factor"] for r in records] == ["x1", "x2", "x3"]
    for record in records:
        assert {"output", "factor", "S1", "S1_lo", "S1_hi", "ST", "ST_lo", "ST_hi"} <= set(record)
        assert record["output"] == "y"
        assert record["S1_lo"] <= record["S1"] <= record["S1_hi"]
    assert main(["sensitivity", "cube.zarr", "--resamples", "49"]) == 0
    text = capsys.readouterr().out
    assert "Sobol indices of y" in text and "SD shrink if known" in text


def test_sensitivity_command_incomplete_store_exits_2(monkeypatch, capsys):
    ds = saltelli_cube(5, ["x1", "x2", "x3"], ishigami, -np.pi, np.pi)
    mask = np.ones(ds.sizes["row"], bool)
    mask[:8] = False
    monkeypatch.setattr("sweep.analysis.load_cube", lambda path: (ds, mask))
    assert main(["sensitivity", "cube.zarr"]) == 2
    err = capsys.readouterr().err
    assert "Sobol indices need every block" in err and len(err.strip().splitlines()) == 1
