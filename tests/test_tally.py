"""Tally: counts per row, grid point, concept, band and category, against a loop over planets."""

import itertools

import numpy as np
import pytest
from pydantic import ValidationError

from sweep.physics import habitability
from sweep.structs import PlanetBatch, StarTable
from sweep.tally import CategoriesSection, Tally


def make_block(seed, n_rows=3, n=400, n_stars=6):
    rng = np.random.default_rng(seed)
    stars = StarTable(
        name=np.array([f"s{i}" for i in range(n_stars)]), distance_pc=rng.uniform(3, 20, n_stars),
        teff_K=rng.uniform(3000, 7000, n_stars), radius_rsun=rng.uniform(0.3, 1.5, n_stars),
        mass_msun=rng.uniform(0.3, 1.4, n_stars), luminosity_lsun=rng.uniform(0.02, 3.0, n_stars),
        spectral_class=rng.integers(0, 4, n_stars).astype(np.int8), ecliptic_latitude_deg=np.zeros(n_stars))
    u = lambda lo, hi: rng.uniform(lo, hi, n)  # noqa: E731
    planets = PlanetBatch(
        row=rng.integers(0, n_rows, n), star=rng.integers(0, n_stars, n), radius_rearth=u(0.2, 8.0),
        period_d=u(1, 1000), semi_major_axis_au=u(0.1, 5), eccentricity=u(0, 0.3), inclination_rad=u(0, 3),
        arg_periapsis_rad=u(0, 6), mean_anomaly_rad=u(0, 6), bond_albedo=u(0, 0.7), geometric_albedo=u(0, 0.5),
        teq_K=u(80, 900), insolation_searth=np.exp(u(-3, 3)), mass_mearth=u(0.1, 30),
        rv_semi_amplitude_ms=np.exp(u(-4, 2)), separation_au=u(0.1, 5), orbital_distance_au=u(0.1, 5),
        phase_angle_rad=u(0, 3))
    return rng, stars, planets


CATEGORIES = dict(
    radius_rearth=[0.5, 1.5, 4.0], teq_K=[150.0, 300.0, 600.0], spectral_class=True,
    criteria=[{"name": "hz", "habitable_zone": "conservative"},
              {"name": "hz-wide", "habitable_zone": "optimistic", "radius_rearth": [0.5, 2.0]},
              {"name": "warm", "teq_K": [200.0, 400.0], "insolation_searth": [0.1, float("inf")]}],
    rv_threshold_ms=0.5)


def reference_counts(cats, tally, planets, stars, n_rows, detections, grid_shape):
    """The same counts by a plain loop over planets (slow reference, common practice)."""
    def bin_of(value, edges):
        for i, (lo, hi) in enumerate(zip(edges, edges[1:])):
            if lo <= value < hi:
                return i + (1 if cats.overflow_bins else 0)
        if cats.overflow_bins:
            return 0 if value < edges[0] else len(edges)
        return None

    def criterion(c, i):
        ok = True
        for key in ("radius_rearth", "teq_K", "insolation_searth"):
            rng = getattr(c, key)
            if rng is not None:
                ok &= rng[0] <= getattr(planets, key)[i] < rng[1]
        if c.habitable_zone is not None:
            inner, outer = {"conservative": ("runaway-greenhouse", "maximum-greenhouse"),
                            "optimistic": ("recent-venus", "early-mars")}[c.habitable_zone]
            s = planets.star[i]
            lum, teff = stars.luminosity_lsun[s], stars.teff_K[s]
            # in distance, as Kopparapu et al. 2014 state the zone: d_inner <= a_equivalent <= d_outer
            a_eq = np.sqrt(lum / planets.insolation_searth[i])
            ok &= (habitability.habitable_zone_distance_au(lum, teff, inner) * (1 - 1e-12) <= a_eq
                   <= habitability.habitable_zone_distance_au(lum, teff, outer) * (1 + 1e-12))
        return bool(ok)

    cat_shape = tally.category_shape
    n_conc = len(tally.band_counts)
    n_levels = max(tally.band_counts) + 1
    out = {
        "present": np.zeros((n_rows,) + cat_shape, int),
        "detected": np.zeros((n_rows,) + grid_shape + (sum(tally.band_counts),) + cat_shape, int),
        "detected_any": np.zeros((n_rows,) + grid_shape + (n_conc,) + cat_shape, int),
        "band_multiplicity": np.zeros((n_rows,) + grid_shape + (n_conc,) + cat_shape + (n_levels,), int),
        "rv_confirmable": np.zeros((n_rows,) + grid_shape + (n_conc,) + cat_shape, int),
        "criterion_present": np.zeros((n_rows, len(cats.criteria)), int),
        "criterion_detected": np.zeros((n_rows,) + grid_shape + (n_conc, len(cats.criteria)), int),
    }
    grid_points = list(itertools.product(*(range(k) for k in grid_shape)))
    for i in range(len(planets)):
        r = planets.row[i]
        key = []
        if cats.radius_rearth is not None:
            key.append(bin_of(planets.radius_rearth[i], cats.radius_rearth))
        if cats.teq_K is not None:
            key.append(bin_of(planets.teq_K[i], cats.teq_K))
        if cats.spectral_class:
            key.append(int(stars.spectral_class[planets.star[i]]))
        binned = None not in key
        key = tuple(key)
        meets = [criterion(c, i) for c in cats.criteria]
        for k, m in enumerate(meets):
            out["criterion_present"][r, k] += m
        if binned:
            out["present"][(r,) + key] += 1
        for g, point in enumerate(grid_points):
            channel = 0
            for c, per_concept in enumerate(detections[g]):
                hits = 0
                for b in range(per_concept.shape[0]):
                    if per_concept[b, i]:
                        hits += 1
                        if binned:
                            out["detected"][(r,) + point + (channel,) + key] += 1
                    channel += 1
                if binned:
                    out["band_multiplicity"][(r,) + point + (c,) + key + (hits,)] += 1
                if hits:
                    if binned:
                        out["detected_any"][(r,) + point + (c,) + key] += 1
                        if planets.rv_semi_amplitude_ms[i] > cats.rv_threshold_ms:
                            out["rv_confirmable"][(r,) + point + (c,) + key] += 1
                    for k, m in enumerate(meets):
                        out["criterion_detected"][(r,) + point + (c, k)] += m
    return out


@pytest.mark.parametrize("overflow", [False, True])
@pytest.mark.parametrize("grid_shape", [(), (2,), (2, 3)])
def test_counts_match_a_loop_over_planets(overflow, grid_shape):
    n_rows = 3
    rng, stars, planets = make_block(seed=len(grid_shape) + 10 * overflow, n_rows=n_rows)
    cats = CategoriesSection(**CATEGORIES, overflow_bins=overflow)
    axes = [(f"concepts.a.axis{i}_m", np.linspace(1, 2, k)) for i, k in enumerate(grid_shape)]
    band_counts = [2, 3, 1]
    tally = Tally(cats, band_counts, axes, concept_names=["a", "b", "c"],
                  band_names=[["x", "y"], ["u", "v", "w"], ["z"]])
    n_grid = int(np.prod(grid_shape))
    detections = [[rng.random((nb, len(planets))) < 0.35 for nb in band_counts] for _ in range(n_grid)]
    got = tally.count(planets, stars, n_rows, detections)
    want = reference_counts(cats, tally, planets, stars, n_rows, detections, grid_shape)
    assert want["criterion_present"].min() >= 0 and want["criterion_present"][:, 0].sum() > 0  # HZ members exist
    for variable in tally.outputs():
        assert got[variable.name].dtype == np.uint32
        assert got[variable.name].shape[1:] == tuple(
            len(tally.coords()[d][0]) for d in variable.dims), variable.name
        np.testing.assert_array_equal(got[variable.name], want[variable.name], err_msg=variable.name)


def test_overflow_bins_count_every_planet_and_plain_bins_drop_the_rest():
    rng, stars, planets = make_block(seed=3)
    det = [[rng.random((1, len(planets))) < 0.5]]
    plain = Tally(CategoriesSection(radius_rearth=[1.0, 2.0]), [1], []).count(planets, stars, 3, det)
    inside = (planets.radius_rearth >= 1.0) & (planets.radius_rearth < 2.0)
    assert plain["present"].sum() == inside.sum() < len(planets)
    full = Tally(CategoriesSection(radius_rearth=[1.0, 2.0], overflow_bins=True), [1], [])
    counts = full.count(planets, stars, 3, det)
    assert counts["present"].sum() == len(planets)
    assert list(full.coords()["radius_bin"][0]) == ["< 1", "[1, 2)", ">= 2"]
    np.testing.assert_array_equal(counts["present"][:, 1], plain["present"][:, 0])


def test_no_categories_gives_per_row_totals_and_completeness():
    rng, stars, planets = make_block(seed=4, n_rows=5)
    masks = [[rng.random((2, len(planets))) < 0.2]]
    counts = Tally(None, [2], []).count(planets, stars, 5, masks)
    np.testing.assert_array_equal(counts["present"], np.bincount(planets.row, minlength=5))
    assert counts["detected_any"].shape == (5, 1)
    completeness = counts["detected_any"][:, 0] / counts["present"]
    assert np.all((completeness >= 0) & (completeness <= 1))
    assert set(counts) == {"present", "detected", "detected_any", "band_multiplicity"}


def test_outputs_and_coords_follow_the_cube_layout():
    cats = CategoriesSection(**CATEGORIES)
    tally = Tally(cats, [2, 1], [("concepts.m.aperture_diameter_m", [4.0, 6.0])], concept_names=["m", "n"],
                  band_names=[["V", "I"], ["N"]])
    dims = {v.name: v.dims for v in tally.outputs()}
    grid = ("concepts.m.aperture_diameter_m",)
    assert dims["present"] == ("radius_bin", "teq_bin", "spectral_class")
    assert dims["detected"] == grid + ("channel", "radius_bin", "teq_bin", "spectral_class")
    assert dims["band_multiplicity"] == grid + ("concept", "radius_bin", "teq_bin", "spectral_class", "n_bands")
    assert dims["criterion_detected"] == grid + ("concept", "criterion")
    coords = tally.coords()
    assert list(coords["channel"][0]) == ["m/V", "m/I", "n/N"]
    assert tally.channel_labels() == (["m", "m", "n"], ["V", "I", "N"])
    assert coords["concepts.m.aperture_diameter_m"][1]["units"] == "m"
    assert list(coords["n_bands"][0]) == [0, 1, 2]
    assert all(v.units == "planets" and v.dtype == "uint32" for v in tally.outputs())


@pytest.mark.parametrize("raw, key", [
    ({"radius_rearth": [1.0, 1.0, 2.0]}, "radius_rearth"),
    ({"teq_K": [300.0]}, "teq_K"),
    ({"teq_K": [100.0, float("inf")]}, "teq_K"),
    ({"criteria": [{"name": "empty"}]}, "criteria"),
    ({"criteria": [{"name": "x", "teq_K": [300.0, 200.0]}]}, "teq_K"),
    ({"criteria": [{"name": "x", "habitable_zone": "wide"}]}, "habitable_zone"),
    ({"criteria": [{"name": "x", "teq_K": [1, 2]}, {"name": "x", "teq_K": [2, 3]}]}, "criteria"),
    ({"rv_threshold_ms": -1.0}, "rv_threshold_ms"),
    ({"radius_bins": [1.0, 2.0]}, "radius_bins"),
])
def test_bad_categories_are_rejected_naming_the_key(raw, key):
    with pytest.raises(ValidationError) as info:
        CategoriesSection(**raw)
    assert key in str(info.value)


def test_a_block_without_planets_counts_zeros():
    _, stars, planets = make_block(seed=5)
    none = planets.select(np.zeros(len(planets), bool))
    tally = Tally(CategoriesSection(**CATEGORIES), [2], [("concepts.a.d_m", [1.0, 2.0])])
    counts = tally.count(none, stars, 4, [[np.zeros((2, 0), bool)]] * 2)
    assert set(counts) == {v.name for v in tally.outputs()}
    assert all(c.shape[0] == 4 and c.sum() == 0 for c in counts.values())
