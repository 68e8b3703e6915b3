"""Tests of sweep.physics.habitability."""

import numpy as np
import pytest

from sweep.physics import habitability as hz


def test_solar_habitable_zone():
    # Kopparapu et al. 2014, ApJL 787, L29 (from memory): for the Sun (T_eff = 5780 K), runaway
    # greenhouse near 0.95 au, maximum greenhouse near 1.67 au
    assert hz.habitable_zone_distance_au(1.0, 5780.0, "runaway-greenhouse") == pytest.approx(
        0.95, abs=0.01)
    assert hz.habitable_zone_distance_au(1.0, 5780.0, "maximum-greenhouse") == pytest.approx(
        1.67, abs=0.01)
    # recent Venus 0.75 au, early Mars 1.77 au (Kopparapu et al. 2013, ApJ 765, 131; from memory)
    assert hz.habitable_zone_distance_au(1.0, 5780.0, "recent-venus") == pytest.approx(0.75, abs=0.01)
    assert hz.habitable_zone_distance_au(1.0, 5780.0, "early-mars") == pytest.approx(1.77, abs=0.01)


def test_flux_limits_at_solar_temperature_are_the_table_constants():
    # S_eff(5780 K) = S_eff_sun of Table 1 (Kopparapu et al. 2014, from memory)
    for limit, s0 in [("recent-venus", 1.776), ("runaway-greenhouse", 1.107),
                      ("maximum-greenhouse", 0.356), ("early-mars", 0.320)]:
        assert hz.effective_flux_limit(5780.0, limit) == pytest.approx(s0, rel=1e-12)


def test_limits_ordered_and_clipped():
    # inner limits receive more flux than outer ones for every valid T_eff (Kopparapu et al. 2014,
    # Fig. 1); T_eff outside 2600-7200 K is clipped (documented choice)
    t = np.linspace(2600, 7200, 47)
    s = np.array([hz.effective_flux_limit(t, k) for k in
                  ("recent-venus", "runaway-greenhouse", "maximum-greenhouse", "early-mars")])
    assert np.all(np.diff(s, axis=0) < 0)
    assert np.all(np.diff(s[1]) > 0)  # cooler stars: limits at lower flux
    assert hz.effective_flux_limit(2000.0, "runaway-greenhouse") == hz.effective_flux_limit(
        2600.0, "runaway-greenhouse")
    assert hz.effective_flux_limit(9000.0, "early-mars") == hz.effective_flux_limit(
        7200.0, "early-mars")
    with pytest.raises(ValueError, match="limit"):
        hz.effective_flux_limit(5000.0, "moist-greenhouse")


def test_habitable_zone_scales_with_luminosity_and_broadcasts():
    # d ~ sqrt(L) at fixed T_eff (inverse-square law)
    d = hz.habitable_zone_distance_au(np.array([[0.01], [1.0], [4.0]]), np.array([3500.0, 5780.0]),
                                      "runaway-greenhouse")
    assert d.shape == (3, 2)
    np.testing.assert_allclose(d[2] / d[1], 2.0, rtol=1e-12)
    np.testing.assert_allclose(d[1] / d[0], 10.0, rtol=1e-12)


def test_insolation():
    # inverse-square law: Earth gets 1 S_earth; 1/4 at 2 au
    assert hz.insolation_searth(1.0, 1.0) == 1.0
    np.testing.assert_allclose(hz.insolation_searth(np.array([1.0, 2.0]), np.array([[2.0], [1.0]])),
                               [[0.25, 0.5], [1.0, 2.0]])
    # the runaway-greenhouse limit distance receives exactly S_eff
    lum, t = 0.3, 4500.0
    d = hz.habitable_zone_distance_au(lum, t, "runaway-greenhouse")
    assert hz.insolation_searth(lum, d) == pytest.approx(
        hz.effective_flux_limit(t, "runaway-greenhouse"), rel=1e-12)
