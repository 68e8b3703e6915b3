"""Analytic test functions behind the :class:`~sweep.blocks.BlockModel` interface.

The Ishigami function and the Sobol' G function have known Sobol indices, so a sweep of either
checks the whole chain (design, engine, store, analysis) against exact values. They are
deterministic: rows carry no population draw.
"""

from __future__ import annotations

import numpy as np

from sweep.blocks import OutputVariable, RowBlock


class _TestFunction:
    """Shared plumbing: inputs by factor name (or fixed constants), one float64 output ``y``."""

    description = ""

    def __init__(self, input_names, constants=None):
        self.input_names = tuple(input_names)
        self.constants = {name: float(value) for name, value in (constants or {}).items()}

    def _inputs(self, block: RowBlock) -> list[np.ndarray]:
        n = len(block)
        columns = []
        for name in self.input_names:
            if name in block.factors:
                columns.append(np.asarray(block.factors[name], dtype=np.float64))
            elif name in self.constants:
                columns.append(np.full(n, self.constants[name]))
            else:
                raise KeyError(f"input {name!r} is neither a factor of the block nor a constant")
        return columns

    def outputs(self) -> list[OutputVariable]:
        """One float64 variable ``y`` with no dimension after ``row``."""
        return [OutputVariable("y", (), "float64", "1", self.description)]

    def coords(self) -> dict:
        """No dimension after ``row``: no coordinates."""
        return {}

    def evaluate(self, block: RowBlock) -> dict[str, np.ndarray]:
        """``{"y": array (n,)}`` for the rows of ``block``."""
        return {"y": self(*self._inputs(block))}


class IshigamiModel(_TestFunction):
    """The Ishigami function y = sin x1 + a sin^2 x2 + b x3^4 sin x1.

    Parameters
    ----------
    a : float
        Coefficient of sin^2 x2 [1] (7 in the usual benchmark).
    b : float
        Coefficient of x3^4 sin x1 [1] (0.1 in the usual benchmark).
    input_names : tuple of str
        Factor names of x1, x2, x3 [rad] (usually uniform on [-pi, pi]).
    constants : dict of str to float, optional
        Values of inputs that are fixed rather than factors [rad].

    References
    ----------
    .. [1] T. Ishigami and T. Homma, "An importance quantification technique in uncertainty
       analysis for computer models", Proc. ISUMA '90, First International Symposium on
       Uncertainty Modeling and Analysis, 398-403 (1990). doi:10.1109/ISUMA.1990.151285
    """

    description = "Ishigami function sin x1 + a sin^2 x2 + b x3^4 sin x1 (Ishigami & Homma 1990)"

    def __init__(self, a: float = 7.0, b: float = 0.1,
                 input_names=("inputs.x1", "inputs.x2", "inputs.x3"), constants=None):
        if len(input_names) != 3:
            raise ValueError("the Ishigami function has exactly three inputs")
        super().__init__(input_names, constants)
        self.a = float(a)
        self.b = float(b)

    def __call__(self, x1, x2, x3):
        """Value of the function [1] at x1, x2, x3 [rad] (arrays broadcast)."""
        sin_x1 = np.sin(x1)
        return sin_x1 + self.a * np.sin(x2) ** 2 + self.b * np.asarray(x3, dtype=np.float64) ** 4 * sin_x1

    def variance(self) -> float:
        """Variance of y for x_i uniform on [-pi, pi] (Ishigami & Homma 1990)."""
        return self.a**2 / 8 + self.b * np.pi**4 / 5 + self.b**2 * np.pi**8 / 18 + 0.5

    def first_order(self) -> np.ndarray:
        """Exact first-order Sobol indices (S1, S2, S3) for x_i uniform on [-pi, pi]."""
        v1 = 0.5 * (1 + self.b * np.pi**4 / 5) ** 2
        v2 = self.a**2 / 8
        return np.array([v1, v2, 0.0]) / self.variance()

    def total_order(self) -> np.ndarray:
        """Exact total Sobol indices (T1, T2, T3) for x_i uniform on [-pi, pi]."""
        v13 = self.b**2 * np.pi**8 * (1 / 18 - 1 / 50)
        first = self.first_order() * self.variance()
        return np.array([first[0] + v13, first[1], v13]) / self.variance()


class SobolGModel(_TestFunction):
    """The Sobol' G function y = prod_i (|4 x_i - 2| + a_i) / (1 + a_i).

    Parameters
    ----------
    a : list of float
        Coefficients a_i >= 0 [1]; a small a_i makes x_i important.
    input_names : tuple of str
        Factor names of x_1 .. x_k [1] (usually uniform on [0, 1]).
    constants : dict of str to float, optional
        Values of inputs that are fixed rather than factors [1].

    References
    ----------
    .. [1] A. Saltelli and I. M. Sobol', "About the use of rank transformation in sensitivity
       analysis of model output", Reliability Engineering & System Safety 50, 225-239 (1995).
       doi:10.1016/0951-8320(95)00099-2
    """

    description = "Sobol' G function prod (|4 x - 2| + a) / (1 + a) (Saltelli & Sobol 1995)"

    def __init__(self, a, input_names=None, constants=None):
        a = np.asarray(a, dtype=np.float64)
        if a.ndim != 1 or a.size == 0 or np.any(a < 0):
            raise ValueError("a must be a non-empty list of numbers >= 0")
        if input_names is None:
            input_names = tuple(f"inputs.x{i + 1}" for i in range(a.size))
        if len(input_names) != a.size:
            raise ValueError("the Sobol' G function needs one input per coefficient a_i")
        super().__init__(input_names, constants)
        self.a = a

    def __call__(self, *x):
        """Value of the function [1] at x_1 .. x_k [1] (arrays broadcast)."""
        y = 1.0
        for xi, ai in zip(x, self.a):
            y = y * (np.abs(4.0 * np.asarray(xi, dtype=np.float64) - 2.0) + ai) / (1.0 + ai)
        return np.asarray(y, dtype=np.float64)

    def partial_variances(self) -> np.ndarray:
        """V_i = 1 / (3 (1 + a_i)^2) for x_i uniform on [0, 1] (Saltelli & Sobol 1995)."""
        return 1.0 / (3.0 * (1.0 + self.a) ** 2)

    def variance(self) -> float:
        """Variance of y: prod (1 + V_i) - 1."""
        return float(np.prod(1.0 + self.partial_variances()) - 1.0)

    def first_order(self) -> np.ndarray:
        """Exact first-order Sobol indices S_i = V_i / V."""
        return self.partial_variances() / self.variance()

    def total_order(self) -> np.ndarray:
        """Exact total Sobol indices T_i = V_i prod_{j != i} (1 + V_j) / V."""
        v = self.partial_variances()
        return v * np.prod(1.0 + v) / (1.0 + v) / self.variance()
