"""Analytic test functions: values at hand-derivable points and their exact Sobol indices."""

import numpy as np
import pytest
import scipy.stats.qmc

from sweep.blocks import OutputVariable, RowBlock
from sweep.testfunctions import IshigamiModel, SobolGModel

PI = np.pi


def block_of(factors, n):
    return RowBlock(index=0, start=0, stop=n, seed=0, base_index=np.arange(n, dtype=np.int64),
                    population_source=np.zeros(n, dtype=np.int8), factors=factors)


def test_ishigami_at_known_points():
    f = IshigamiModel(a=7.0, b=0.1)
    # y = sin x1 + a sin^2 x2 + b x3^4 sin x1 (Ishigami & Homma 1990), evaluated by hand:
    assert f(PI / 2, PI / 2, PI / 2) == pytest.approx(1 + 7.0 + 0.1 * PI**4 / 16)
    assert f(PI / 2, 0.0, PI) == pytest.approx(1 + 0.1 * PI**4)
    assert f(0.0, PI / 2, 3.0) == pytest.approx(7.0)  # sin 0 = 0 removes both x1 terms
    assert f(-PI / 2, PI / 2, 1.0) == pytest.approx(-1 + 7.0 - 0.1)


def test_ishigami_evaluate_reads_the_block():
    names = ("inputs.x1", "inputs.x2", "inputs.x3")
    f = IshigamiModel(5.0, 0.2, names, constants={"inputs.x3": 2.0})
    block = block_of({"inputs.x1": np.array([PI / 2, 0.0]), "inputs.x2": np.array([PI / 2, PI / 2])}, 2)
    out = f.evaluate(block)
    assert set(out) == {"y"} and out["y"].shape == (2,) and out["y"].dtype == np.float64
    np.testing.assert_allclose(out["y"], [1 + 5.0 + 0.2 * 16, 5.0])  # by hand from the formula
    assert f.outputs() == [OutputVariable("y", (), "float64", "1", f.description)]
    assert f.coords() == {}


def test_ishigami_exact_indices():
    f = IshigamiModel(7.0, 0.1)
    # a = 7, b = 0.1: V = 13.8446, S1 = 0.3139, S2 = 0.4424, S3 = 0, T1 = 0.5576, T3 = 0.2437
    # (Saltelli et al. 2008, Global Sensitivity Analysis: The Primer, from memory)
    assert f.variance() == pytest.approx(13.8446, abs=1e-4)
    np.testing.assert_allclose(f.first_order(), [0.3139, 0.4424, 0.0], atol=1e-4)
    np.testing.assert_allclose(f.total_order(), [0.5576, 0.4424, 0.2437], atol=1e-4)


def test_ishigami_variance_by_quadrature():
    f = IshigamiModel(7.0, 0.1)
    # reference: a scrambled Sobol' sample of 2^16 points from scipy.stats.qmc (QMC error << 1e-2)
    x = scipy.stats.qmc.Sobol(d=3, rng=np.random.default_rng(0)).random_base2(16) * 2 * PI - PI
    y = f(*x.T)
    assert y.var() == pytest.approx(f.variance(), rel=1e-2)
    assert y.mean() == pytest.approx(7.0 / 2, abs=2e-2)  # E[a sin^2 x2] = a / 2 (by hand)


def test_sobol_g_at_the_centre_and_corners():
    a = [0.0, 1.0, 4.5, 99.0]
    f = SobolGModel(a)
    # y = prod (|4 x - 2| + a) / (1 + a) (Saltelli & Sobol 1995): at x = 0.5 each term is a / (1 + a)
    assert f(0.5, 0.5, 0.5, 0.5) == pytest.approx(np.prod([ai / (1 + ai) for ai in a]))
    # at x = 1 (or 0) each term is (2 + a) / (1 + a)
    assert f(1.0, 0.0, 1.0, 0.0) == pytest.approx(np.prod([(2 + ai) / (1 + ai) for ai in a]))
    assert f.input_names == ("inputs.x1", "inputs.x2", "inputs.x3", "inputs.x4")


def test_sobol_g_evaluate_and_mean():
    f = SobolGModel([1.0, 2.0], ("inputs.x1", "inputs.x2"))
    x = scipy.stats.qmc.Sobol(d=2, rng=np.random.default_rng(1)).random_base2(14)
    y = f.evaluate(block_of({"inputs.x1": x[:, 0], "inputs.x2": x[:, 1]}, x.shape[0]))["y"]
    assert y.mean() == pytest.approx(1.0, abs=1e-3)  # each term has mean 1 (Saltelli & Sobol 1995)
    assert y.var() == pytest.approx(f.variance(), rel=1e-2)  # reference: scipy.stats.qmc sample


def test_sobol_g_exact_indices():
    f = SobolGModel([0.0, 1.0, 9.0])
    v = 1 / (3 * (1 + np.array([0.0, 1.0, 9.0])) ** 2)  # V_i (Saltelli & Sobol 1995)
    total_variance = np.prod(1 + v) - 1
    assert f.variance() == pytest.approx(total_variance)
    np.testing.assert_allclose(f.first_order(), v / total_variance)
    assert np.all(f.total_order() >= f.first_order())
    # with two inputs the total of x1 is (V1 + V1 V2) / V (by hand from the ANOVA decomposition)
    g = SobolGModel([0.0, 1.0])
    v1, v2 = 1 / 3, 1 / 12
    assert g.total_order()[0] == pytest.approx((v1 + v1 * v2) / (v1 + v2 + v1 * v2))


def test_sobol_g_rejects_negative_a():
    with pytest.raises(ValueError):
        SobolGModel([-0.5])
    with pytest.raises(ValueError):
        SobolGModel([1.0, 2.0], ("inputs.x1",))
