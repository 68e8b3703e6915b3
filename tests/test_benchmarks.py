"""Smoke run of benchmarks/run.py at tiny sizes, so that the benchmark cannot rot.

Benchmarks are not tests: nothing here asserts a time or a speed ratio. The run must finish, print
one JSON object with every figure of issue 8, and its reference loop must agree with the model.
"""

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from benchmarks import reference  # noqa: E402

FIGURES = ["draw_ns_per_planet", "floor_ratio", "detect_ns_per_planet_channel", "reference_speedup",
           "parallel_efficiency_2", "memory_ratio_8x", "engine_overhead"]


@pytest.fixture(scope="module")
def quick_run():
    done = subprocess.run([sys.executable, str(ROOT / "benchmarks" / "run.py"), "--quick", "--json"],
                          capture_output=True, text=True, timeout=600, cwd=ROOT)
    assert done.returncode == 0, done.stderr[-2000:]
    lines = done.stdout.strip().splitlines()
    assert len(lines) == 1  # one JSON object, nothing else on stdout
    return json.loads(lines[0])


@pytest.mark.slow
def test_quick_run_prints_every_figure(quick_run):
    for key in FIGURES:
        assert isinstance(quick_run[key], float) and math.isfinite(quick_run[key]) and quick_run[key] > 0, key
    assert quick_run["quick"] is True and quick_run["demo_wall_s"] is None
    # the draw consumes 10 uniforms per candidate and keeps a fraction of them (produced by this code)
    assert quick_run["uniforms_per_planet"] > 10.0
    assert quick_run["planets_drawn"] > 0 and quick_run["blocks"] > 0


@pytest.mark.slow
def test_quick_run_reference_agrees_with_the_model(quick_run):
    check = quick_run["reference_agreement"]
    assert check["tested"] > 0 and check["reference_planets"] > 0
    assert check["agree"], check


def test_agreement_rejects_a_model_that_counts_twice_as_many():
    # Poisson totals (fixed seed): a reference with half the model's mean must fail the exact binomial test
    rng = np.random.default_rng(3)
    model_sum = rng.poisson(40.0 * 4, size=(10, 3))  # 4 replicates of mean 40 per row
    same = rng.poisson(40.0, size=(10, 3))
    half = rng.poisson(20.0, size=(10, 3))
    assert reference.agreement(same, model_sum, replicates=4)["agree"]
    assert not reference.agreement(half, model_sum, replicates=4)["agree"]


# -- the optimised kernels against the plain way of computing the same thing -------------------------
# (they belong with tests/test_physics_orbits.py and tests/test_planets.py; kept here, the file this
# change owns)
from sweep import occurrence, planets  # noqa: E402
from sweep.physics import orbits  # noqa: E402
from sweep.structs import StarTable  # noqa: E402


def test_kepler_solution_of_an_element_does_not_depend_on_its_neighbours():
    rng = np.random.default_rng(11)
    m, e = rng.uniform(-20.0, 20.0, 5000), rng.beta(0.867, 3.03, 5000)
    e[::97] = 0.97  # slow to converge: in one call with the others, they must not change the others
    together = orbits.eccentric_anomaly(m, e)
    alone = np.array([orbits.eccentric_anomaly(a, b) for a, b in zip(m, e)])
    in_pieces = np.concatenate([orbits.eccentric_anomaly(m[i:i + 7], e[i:i + 7]) for i in range(0, 5000, 7)])
    assert np.array_equal(together, alone) and np.array_equal(together, in_pieces)
    # Kepler's equation E - e sin E = M holds (Murray & Dermott 1999, eq. 2.52; from memory)
    assert np.abs(together - e * np.sin(together) - m).max() < 1e-11


def test_sky_geometry_with_given_cos_and_sin_of_the_inclination():
    rng = np.random.default_rng(12)
    n = 2000
    a, e, omega, m = rng.uniform(0.1, 5, n), rng.uniform(0, 0.9, n), rng.uniform(0, 6.3, n), rng.uniform(0, 6.3, n)
    cos_i = 1.0 - 2.0 * rng.random(n)
    inc = np.arccos(cos_i)
    plain = orbits.sky_geometry(a, e, inc, omega, m)
    given = orbits.sky_geometry(a, e, inc, omega, m, cos_inclination=cos_i,
                                sin_inclination=np.sqrt((1 - cos_i) * (1 + cos_i)))
    for x, y in zip(plain, given):  # the same geometry up to the rounding of cos(arccos c) (common practice)
        np.testing.assert_allclose(x, y, rtol=1e-9, atol=1e-12)


def test_cell_choice_by_table_equals_numpy_searchsorted():
    section = occurrence.PowerLawSection(kind="power-law", radius_rearth=(0.5, 16.0), cells_per_efold=2, pieces=[
        {"radius_max_rearth": 2.0, "gamma": 0.4, "alpha": -0.2, "beta": 0.3},
        {"radius_max_rearth": 4.0, "gamma": 0.0, "alpha": 0.0, "beta": 0.0},
        {"gamma": 0.7, "alpha": -1.2, "beta": 0.6}], classes={"F": {"scale": 0.0}})
    occ = occurrence.build_power_law(section)
    n = 400
    stars = StarTable(name=np.array([f"s{i}" for i in range(n)]), distance_pc=np.full(n, 10.0),
                      teff_K=np.full(n, 5772.0), radius_rsun=np.ones(n), mass_msun=np.ones(n),
                      luminosity_lsun=np.ones(n), spectral_class=(np.arange(n) % 3 + 1).astype(np.int8),
                      ecliptic_latitude_deg=np.full(n, np.nan))
    layout = planets._Layout(stars, occ)
    rng = np.random.default_rng(13)
    star = rng.integers(0, n, 200000)
    u = np.concatenate([rng.random(199980), 1.0 - np.finfo(float).eps * np.arange(1, 11), np.zeros(10)])
    target = layout.star_start[star] + u * layout.star_total[star]
    slow = np.minimum(np.searchsorted(layout.cumulative, target, side="right"), layout.star_last[star])  # numpy
    assert np.array_equal(planets.choose_cells(layout, star, u), slow)
