"""Occurrence models: cell integrals, the uncertainty mapping, factors, and bad tables."""

import math

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table
from pydantic import TypeAdapter, ValidationError
from scipy.special import ndtr

from sweep import occurrence
from sweep.errors import UserInputError

from conftest import YEAR_D, sag13_expected

SECTION = TypeAdapter(occurrence.OccurrenceSection)
PHI_MINUS, PHI_PLUS = float(ndtr(-1.0)), float(ndtr(1.0))  # 0.1587, 0.8413: the 1-sigma quantiles


def build(**section):
    return occurrence.build_occurrence(SECTION.validate_python(section), ".")


# -- power law --------------------------------------------------------------------------------------
def test_sag13_preset_values():
    pieces = occurrence.sag13_pieces()
    assert [(p.gamma, p.alpha, p.beta) for p in pieces] == [(0.38, -0.19, 0.26), (0.73, -1.18, 0.59)]
    assert pieces[0].radius_max_rearth == 3.4 and pieces[1].radius_max_rearth is None


def test_sag13_cells_integrate_the_rate_density_exactly():
    model = build(kind="power-law", preset="sag13", radius_rearth=[0.5, 16.0], period_d=[10.0, 640.0])
    expected = sag13_expected(0.5, 16.0, 10.0, 640.0)  # analytic integral (see conftest.power_law_integral)
    np.testing.assert_allclose(model.nominal.sum(axis=1), expected, rtol=1e-12)
    # every cell: its own analytic integral
    r1, r2 = np.exp(model.lnr_lo[1]), np.exp(model.lnr_hi[1])
    p1, p2 = np.exp(model.lnp_lo[1]), np.exp(model.lnp_hi[1])
    each = [sag13_expected(*v) for v in zip(r1, r2, p1, p2)]
    np.testing.assert_allclose(model.nominal[1], each, rtol=1e-10)
    # the break radius is a cell edge, so each cell has one power law
    assert np.isclose(np.exp(model.lnr_lo[1]), 3.4).any()


def test_grid_resolution_sets_cells_not_rates():
    coarse = build(kind="power-law", preset="sag13", cells_per_efold=1)
    fine = build(kind="power-law", preset="sag13", cells_per_efold=6)
    assert fine.n_cells > 4 * coarse.n_cells
    np.testing.assert_allclose(coarse.nominal.sum(1), fine.nominal.sum(1), rtol=1e-12)


def test_explicit_pieces_with_zero_exponents():
    model = build(kind="power-law", pieces=[{"gamma": 0.5, "alpha": 0.0, "beta": 0.0}],
                  radius_rearth=[1.0, 4.0], period_d=[10.0, 100.0], uncertainty="none")
    # dN/dlnR dlnP = 0.5 everywhere: N = 0.5 ln 4 ln 10
    np.testing.assert_allclose(model.nominal.sum(1), 0.5 * math.log(4) * math.log(10), rtol=1e-12)
    assert model.factors() == []


def test_class_overrides():
    model = build(kind="power-law", preset="sag13", classes={
        "F": {"scale": 0.0},
        "M": {"pieces": [{"gamma": 1.0, "alpha": 0.0, "beta": 0.0}], "scale": 2.0},
    }, radius_rearth=[1.0, 2.0], period_d=[20.0, 40.0], uncertainty="none")
    totals = model.nominal.sum(1)
    assert totals[0] == 0.0
    assert totals[1] == pytest.approx(sag13_expected(1.0, 2.0, 20.0, 40.0), rel=1e-12)
    assert totals[3] == pytest.approx(2.0 * math.log(2) * math.log(2), rel=1e-12)


def test_power_law_spread_mapping_and_envelope():
    model = build(kind="power-law", preset="sag13", spread=2.0)
    assert [f.name for f in model.factors()] == ["occurrence.rates"]
    q = np.array([0.5, PHI_MINUS, PHI_PLUS, 0.99])
    rates = model.cell_rates({"occurrence.rates": q})
    np.testing.assert_allclose(rates[0], model.nominal, rtol=1e-12)       # median = nominal
    np.testing.assert_allclose(rates[1], model.nominal / 2.0, rtol=1e-9)  # -1 sigma: / spread
    np.testing.assert_allclose(rates[2], model.nominal * 2.0, rtol=1e-9)  # +1 sigma: * spread
    np.testing.assert_allclose(rates[3], model.envelope, rtol=1e-12)      # envelope: the 0.99 quantile
    np.testing.assert_allclose(model.expected_planets_per_star({"occurrence.rates": q}), rates.sum(-1))


def test_power_law_independent_factors_form_one_group():
    model = build(kind="power-law", preset="sag13", uncertainty="independent", cells_per_efold=1)
    factors = model.factors()
    assert len(factors) == model.n_cells  # one per grid cell, shared by the classes (no overrides)
    assert {f.group for f in factors} == {"occurrence.rates"}
    assert all(f.name.startswith("occurrence.rates.") and "." not in f.name[len("occurrence.rates."):]
               for f in factors)
    values = {f.name: np.array([0.5]) for f in factors}
    values[factors[3].name] = np.array([PHI_PLUS])
    rates = model.cell_rates(values)[0]
    changed = ~np.isclose(rates, model.nominal, rtol=1e-12)
    assert changed.sum() == 4 and changed[:, 3].all()  # that cell, in all four classes
    with pytest.raises(KeyError):
        model.cell_rates({})


@pytest.mark.parametrize("bad", [
    {"kind": "power-law"},                                            # neither preset nor pieces
    {"kind": "power-law", "preset": "sag13", "pieces": [{"gamma": 1, "alpha": 0, "beta": 0}]},
    {"kind": "power-law", "preset": "sag13", "radius_rearth": [4.0, 1.0]},
    {"kind": "power-law", "preset": "sag13", "spread": 0.5},
    {"kind": "power-law", "preset": "sag13", "uncertainty": "sometimes"},
    {"kind": "power-law", "pieces": [{"gamma": 1, "alpha": 0, "beta": 0}, {"gamma": 1, "alpha": 0, "beta": 0}]},
    {"kind": "power-law", "preset": "sag13", "classes": {"A": {"scale": 1.0}}},
    {"kind": "histogram", "table": "x.ecsv"},
    {"kind": "binned"},
])
def test_section_rejects(bad):
    with pytest.raises(ValidationError):
        SECTION.validate_python(bad)


# -- binned ---------------------------------------------------------------------------------------
def example():
    return build(kind="binned", table="sweep:binned_example.ecsv")


def example_table():
    return Table.read(occurrence.table_path("sweep:binned_example.ecsv", "."))


def test_packaged_example_is_labelled_invented():
    table = example_table()
    assert table.meta["invented"] is True and "INVENTED" in table.meta["description"]


def test_binned_shared_mapping_reproduces_the_quoted_interval():
    table, model = example_table(), example()
    measured = ~np.asarray(table["upper_limit"])
    rate = np.asarray(table["rate"])
    codes = np.array(["FGKM".index(c) for c in table["spectral_class"]])
    cell = np.concatenate([np.arange((codes == c).sum()) for c in range(4)])

    def at(q):
        return model.cell_rates({"occurrence.rates": np.array([q])})[0][codes, cell]

    np.testing.assert_allclose(at(0.5)[measured], rate[measured], rtol=1e-12)
    # 1-sigma quantiles Phi(-1), Phi(+1) give rate - err_down and rate + err_up exactly (documented mapping)
    np.testing.assert_allclose(at(PHI_MINUS)[measured], (rate - table["rate_err_down"])[measured], rtol=1e-9)
    np.testing.assert_allclose(at(PHI_PLUS)[measured], (rate + table["rate_err_up"])[measured], rtol=1e-9)
    # at 0.16 / 0.84 the rates lie within 1 % of that interval's ends (0.16 and 0.84 round Phi(-1), Phi(+1))
    np.testing.assert_allclose(at(0.16)[measured], (rate - table["rate_err_down"])[measured], rtol=0.01)
    np.testing.assert_allclose(at(0.84)[measured], (rate + table["rate_err_up"])[measured], rtol=0.01)
    # upper limits: uniform on [0, U]
    np.testing.assert_allclose(at(0.5)[~measured], 0.5 * rate[~measured])
    np.testing.assert_allclose(at(0.84)[~measured], 0.84 * rate[~measured])
    # all optimistic together: every bin rises with the shared quantile
    assert (at(0.7) > at(0.5)).all()


def test_binned_independent_and_none():
    model = build(kind="binned", table="sweep:binned_example.ecsv", uncertainty="independent")
    factors = model.factors()
    assert len(factors) == len(example_table()) and {f.group for f in factors} == {"occurrence.rates"}
    assert factors[0].name == "occurrence.rates.F_R0p5-1_P10-50"
    none = build(kind="binned", table="sweep:binned_example.ecsv", uncertainty="none")
    assert none.factors() == []
    np.testing.assert_array_equal(none.cell_rates({}, n_rows=3)[2], example().nominal)


def _binned(tmp_path, **changes):
    """A small binned table (invented values) with ``changes`` applied, written as ECSV."""
    table = Table()
    table["spectral_class"] = ["G", "G", "K"]
    table["radius_min_rearth"] = [1.0, 1.0, 1.0] * u.R_earth
    table["radius_max_rearth"] = [2.0, 2.0, 2.0] * u.R_earth
    table["period_min_d"] = [10.0, 100.0, 10.0] * u.d
    table["period_max_d"] = [100.0, 300.0, 100.0] * u.d
    table["rate"] = [0.2, 0.3, 0.25]
    table["rate_err_up"] = [0.1, 0.1, 0.1]
    table["rate_err_down"] = [0.05, 0.1, 0.1]
    for key, value in changes.items():
        if value is None:
            table.remove_column(key)
        else:
            table[key] = value
    path = tmp_path / "rates.ecsv"
    table.write(path, overwrite=True)
    return path


def test_binned_table_units_and_labels(tmp_path):
    path = _binned(tmp_path, period_min_d=[10.0 / YEAR_D, 100.0 / YEAR_D, 10.0 / YEAR_D] * u.yr,
                   label=["a", "b", "c"])
    model = occurrence.read_binned_table(path, "independent")
    np.testing.assert_allclose(np.exp(model.lnp_lo[1, :2]), [10.0, 100.0], rtol=1e-12)
    assert [f.name for f in model.factors()] == ["occurrence.rates.a", "occurrence.rates.b", "occurrence.rates.c"]
    assert model.nominal[0].sum() == 0.0  # no F bins: no F planets
    # a spec names the table relative to its own directory
    built = occurrence.build_occurrence(SECTION.validate_python({"kind": "binned", "table": "rates.ecsv"}), tmp_path)
    np.testing.assert_array_equal(built.nominal, model.nominal)


def _table_error(path) -> str:
    with pytest.raises(UserInputError) as info:
        occurrence.read_binned_table(path)
    message = str(info.value)
    assert "\n" not in message and str(path) in message
    return message


def test_error_missing_column(tmp_path):
    assert "missing column 'rate_err_up'" in _table_error(_binned(tmp_path, rate_err_up=None))


def test_error_nan_rate(tmp_path):
    message = _table_error(_binned(tmp_path, rate=[0.2, np.nan, 0.3]))
    assert "row 2" in message and "'rate'" in message and "not a finite number" in message


def test_error_negative_rate(tmp_path):
    message = _table_error(_binned(tmp_path, rate=[0.2, 0.3, -0.1]))
    assert "row 3" in message and "'rate'" in message and ">= 0" in message


def test_error_unknown_class(tmp_path):
    message = _table_error(_binned(tmp_path, spectral_class=["G", "B", "K"]))
    assert "row 2" in message and "'spectral_class'" in message and "unknown spectral class 'B'" in message


def test_error_unit_cannot_convert(tmp_path):
    message = _table_error(_binned(tmp_path, radius_max_rearth=[2.0, 2.0, 2.0] * u.s))
    assert "'radius_max_rearth'" in message and "cannot be converted" in message


def test_error_empty_table(tmp_path):
    path = _binned(tmp_path)
    Table.read(path)[:0].write(path, overwrite=True)
    assert "has no rows" in _table_error(path)


def test_error_unreadable_file(tmp_path):
    path = tmp_path / "rates.ecsv"
    path.write_text("# %ECSV 1.0\n# ---\n# datatype: [unclosed\nnot, a table\n")
    assert "cannot read the occurrence table" in _table_error(path)


def test_error_min_not_below_max(tmp_path):
    message = _table_error(_binned(tmp_path, period_max_d=[100.0, 50.0, 100.0] * u.d))
    assert "row 2" in message and "'period_max_d'" in message and "larger than period_min_d" in message


def test_error_overlapping_bins(tmp_path):
    message = _table_error(_binned(tmp_path, period_min_d=[10.0, 50.0, 10.0] * u.d))
    assert "row 2" in message and "overlaps the bin of row 1" in message


def test_error_lower_error_reaches_zero(tmp_path):
    message = _table_error(_binned(tmp_path, rate_err_down=[0.05, 0.3, 0.1]))
    assert "row 2" in message and "'rate_err_down'" in message and "upper_limit" in message


def test_error_missing_error_of_a_measured_rate(tmp_path):
    message = _table_error(_binned(tmp_path, rate_err_up=[0.1, np.nan, 0.1]))
    assert "row 2" in message and "'rate_err_up'" in message


def test_upper_limit_may_omit_errors_but_not_be_garbage(tmp_path):
    model = occurrence.read_binned_table(_binned(tmp_path, upper_limit=[False, True, False],
                                                 rate_err_up=[0.1, np.nan, 0.1]))
    assert model.nominal[1, 1] == pytest.approx(0.15)  # U / 2
    message = _table_error(_binned(tmp_path, upper_limit=["no", "maybe", "yes"]))
    assert "row 1" in message and "'upper_limit'" in message


def test_error_repeated_label(tmp_path):
    message = _table_error(_binned(tmp_path, label=["a", "b", "a"]))
    assert "row 3" in message and "'label'" in message and "repeats row 1" in message
