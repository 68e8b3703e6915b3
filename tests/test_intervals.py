"""Medians, credible intervals, standard error of the median and completeness
(sweep.analysis.intervals) and the `sweep summary` command."""

import json

import numpy as np
import pytest
import scipy.stats
import xarray as xr

from sweep.analysis.intervals import (
    credible_interval,
    intervals,
    median,
    median_standard_error,
)
from sweep.cli import main
from sweep.errors import UserInputError

RATES = np.array([[0.7, 2.1], [3.3, 1.4]])  # invented expected counts per (radius, teq) bin
CATS = {"radius_bin": ["small", "large"], "teq_bin": ["cold", "warm"]}


def poisson_cube(rows=20000, seed=1):
    """A Monte Carlo cube with fixed rates and a detect-everything concept: counts per bin are
    Poisson, and every planet present is detected."""
    rng = np.random.default_rng(seed)
    present = rng.poisson(RATES, size=(rows,) + RATES.shape).astype(np.uint32)
    detected = present[:, None, None]  # grid axis of length 1, one concept
    ds = xr.Dataset(
        {"present": (("row", "radius_bin", "teq_bin"), present,
                     {"units": "planets", "description": "planets drawn"}),
         "detected_any": (("row", "instrument.aperture_m", "concept", "radius_bin", "teq_bin"),
                          detected, {"units": "planets", "description": "detected"})},
        coords={"block": ("row", np.full(rows, "MC")), "base_index": ("row", np.arange(rows)),
                "instrument.aperture_m": ("instrument.aperture_m", [6.0], {"units": "m"}),
                "concept": ["everything"], **CATS})
    ds.attrs = dict(mode="monte-carlo", rows=rows, block_rows=1000, seed=seed,
                    grid_axes=json.dumps(["instrument.aperture_m"]), spec_hash="0" * 64)
    return ds


def allowed_quantiles(dist, q, n, sigmas=4.0):
    """Values an empirical q-quantile (inverted CDF) of n draws may take: ppf(q), and a neighbour
    when the CDF there lies within `sigmas` binomial standard errors of q."""
    k = dist.ppf(q)
    tol = sigmas * np.sqrt(q * (1 - q) / n)
    allowed = {k}
    if abs(dist.cdf(k - 1) - q) < tol:
        allowed.add(k - 1)
    if abs(dist.cdf(k) - q) < tol:
        allowed.add(k + 1)
    return allowed


def test_poisson_yield_summary_matches_poisson_quantiles(monkeypatch, capsys):
    ds = poisson_cube()
    monkeypatch.setattr("sweep.analysis.load_cube", lambda path: (ds, None))
    assert main(["summary", "cube.zarr", "--json"]) == 0
    records = json.loads(capsys.readouterr().out)
    record = next(r for r in records if r["output"] == "detected_any")
    assert record["concept"] == "everything" and record["instrument.aperture_m"] == 6.0
    assert record["category"] == "total"
    # sum of independent Poisson counts is Poisson with the summed rate (from memory);
    # quantiles from scipy.stats.poisson.ppf
    dist = scipy.stats.poisson(RATES.sum())
    n = ds.sizes["row"]
    assert record["median"] in allowed_quantiles(dist, 0.5, n)
    for key, level in (("68", 0.68), ("95", 0.95)):
        low, high = record["intervals"][key]
        assert low in allowed_quantiles(dist, (1 - level) / 2, n)
        assert high in allowed_quantiles(dist, (1 + level) / 2, n)
    # mean within 4 standard errors of the rate (Poisson variance = rate, from memory)
    assert abs(record["mean"] - RATES.sum()) < 4 * np.sqrt(RATES.sum() / n)
    # every planet present is detected: completeness is exactly 1 (definition)
    assert record["completeness"] == 1.0
    assert record["rows_used"] == record["rows_total"] == n


def test_per_category_quantiles_match_poisson_per_bin():
    ds = poisson_cube(rows=8000, seed=2)
    res = intervals(ds, variables=["detected_any"], keep=("radius_bin", "teq_bin"))
    low, high = credible_interval(res, "detected_any", 0.95)
    for i in range(2):
        for j in range(2):
            # each bin is Poisson with its own rate (scipy.stats.poisson)
            dist = scipy.stats.poisson(RATES[i, j])
            at = dict(radius_bin=i, teq_bin=j, concept=0, **{"instrument.aperture_m": 0})
            assert float(low.isel(at)) in allowed_quantiles(dist, 0.025, 8000)
            assert float(high.isel(at)) in allowed_quantiles(dist, 0.975, 8000)
    # means add up over categories (linearity of the mean)
    total = intervals(ds, variables=["detected_any"])
    np.testing.assert_allclose(res["detected_any_mean"].sum(["radius_bin", "teq_bin"]).values,
                               total["detected_any_mean"].values)


def test_intervals_cover_the_truth_at_their_nominal_rates():
    rows, trials = 400, 2000
    rng = np.random.default_rng(3)
    dist = scipy.stats.gamma(a=3.0, scale=2.0)  # a skewed yield-like distribution
    ds = xr.Dataset({"y": (("row", "trial"), dist.rvs(size=(rows, trials), random_state=rng),
                           {"units": "1"})})
    truth = dist.rvs(size=trials, random_state=rng)  # the yield that happens, one per trial
    res = intervals(ds)
    for level in (0.68, 0.95):
        low, high = credible_interval(res, "y", level)
        covered = np.mean((low.values <= truth) & (truth <= high.values))
        # binomial standard error of a coverage fraction over the trials; 4 sigma (common practice)
        assert abs(covered - level) < 4 * np.sqrt(level * (1 - level) / trials), (level, covered)
    # the Maritz-Jarrett standard error predicts the scatter of the median between trials;
    # the scatter of a standard deviation over 2000 trials is ~1.6 % (from memory), allow 10 %
    scatter = float(median(res, "y").std())
    assert float(res["y_median_se"].mean()) == pytest.approx(scatter, rel=0.10)


def test_median_standard_error_matches_scipy_mjci():
    rng = np.random.default_rng(4)
    data = rng.lognormal(size=(301, 3))
    data[:, 2] = rng.poisson(4.0, size=301)  # counts, with ties
    ours = median_standard_error(data)
    # scipy.stats.mstats.mjci (reference library), one column at a time
    ref = [scipy.stats.mstats.mjci(data[:, k], prob=[0.5])[0] for k in range(3)]
    np.testing.assert_allclose(ours, ref, rtol=1e-10)


def saltelli_like_cube(n=64):
    """A Saltelli cube whose AB rows hold absurd values: they must not enter the intervals."""
    labels = np.repeat(["A", "B", "AB:x1", "AB:population"], n)
    y = np.concatenate([np.arange(n), np.arange(n) + 0.5, np.full(2 * n, 1e6)])
    ds = xr.Dataset({"y": ("row", y, {"units": "1"})},
                    coords={"block": ("row", labels), "base_index": ("row", np.tile(np.arange(n), 4)),
                            "inputs.x1": ("row", np.zeros(4 * n))})
    ds.attrs = dict(mode="saltelli", base_rows=n, block_rows=16,
                    sobol_inputs=json.dumps(["x1", "population"]))
    return ds


def test_saltelli_cube_uses_only_a_and_b_rows():
    ds = saltelli_like_cube()
    res = intervals(ds)
    assert res.attrs["rows_used"] == res.attrs["rows_total"] == 128
    # mean of 0..63 and 0.5..63.5 (arithmetic)
    assert float(res["y_mean"]) == pytest.approx(31.75)
    assert float(credible_interval(res, "y", 0.95)[1]) < 64


def test_missing_rows_use_the_rows_present_and_say_so():
    ds = saltelli_like_cube()
    mask = np.ones(ds.sizes["row"], bool)
    mask[16:32] = False  # one block of A rows not computed yet
    res = intervals(ds, rows_complete=mask)
    assert res.attrs["rows_used"] == 112 and res.attrs["rows_total"] == 128
    assert "112 of 128" in res.attrs["note"] and "missing" in res.attrs["note"]
    subset = ds.isel(row=np.flatnonzero(mask))
    np.testing.assert_allclose(res["y"].values, intervals(subset)["y"].values)
    # indices of complete rows work the same as a mask
    same = intervals(ds, rows_complete=np.flatnonzero(mask))
    np.testing.assert_allclose(same["y"].values, res["y"].values)
    with pytest.raises(UserInputError, match="no complete"):
        intervals(ds, rows_complete=np.zeros(ds.sizes["row"], bool))


def test_labels_units_and_quantile_dimension_are_kept():
    ds = poisson_cube(rows=200)
    ds["detected"] = ds["detected_any"].rename(concept="channel").assign_coords(
        channel_concept=("channel", ["everything"]), band=("channel", ["vis"]))
    res = intervals(ds, levels=(0.5, 0.9))
    assert res["detected_any"].dims[0] == "quantile"
    np.testing.assert_allclose(res["quantile"].values, [0.05, 0.25, 0.5, 0.75, 0.95])
    assert res["detected_any"].attrs["units"] == "planets"
    assert res["detected_any_completeness"].attrs["units"] == "1"
    assert res["detected"]["band"].values.tolist() == ["vis"]
    assert "instrument.aperture_m" in res["detected"].dims
    assert "radius_bin" not in res["detected_any"].dims
    with pytest.raises(UserInputError, match="between 0 and 1"):
        intervals(ds, levels=(68,))
    with pytest.raises(UserInputError, match="not in the cube"):
        intervals(ds, variables=["nothing"])


def test_summary_command_table_and_errors(monkeypatch, capsys):
    ds = poisson_cube(rows=500)
    monkeypatch.setattr("sweep.analysis.load_cube", lambda path: (ds, None))
    assert main(["summary", "cube.zarr", "--per-category"]) == 0
    out = capsys.readouterr().out
    assert "detected_any [planets], total" in out and "everything" in out
    assert "per category" in out and "all 500 independent rows present" in out
    assert main(["summary", "cube.zarr", "--levels", "50,120"]) == 2
    assert "--levels" in capsys.readouterr().err
