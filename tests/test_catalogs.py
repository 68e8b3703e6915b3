"""Star lists: reading, units, the one-line errors, and the synthetic neighbourhood."""

from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
import scipy.stats
from astropy.table import Table
from pydantic import ValidationError

from sweep import catalogs
from sweep.errors import UserInputError
from sweep.physics import stars as stellar
from sweep.structs import SPECTRAL_CLASSES


def _table(**overrides):
    """A small valid star list with units (values invented)."""
    table = Table()
    table["name"] = ["alpha", "beta", "gamma"]
    table["distance_pc"] = [5.0, 10.0, 12.5] * u.pc
    table["teff_K"] = [5772.0, 4500.0, 3300.0] * u.K
    table["radius_rsun"] = [1.0, 0.7, 0.3] * u.R_sun
    table["mass_msun"] = [1.0, 0.7, 0.25] * u.M_sun
    table["spectral_class"] = ["G2V", "K5V", "M3"]
    for key, value in overrides.items():
        table[key] = value
    return table


def _write(table, tmp_path, name="stars.ecsv", **kw):
    path = tmp_path / name
    table.write(path, overwrite=True, **kw)
    return path


# -- reading ---------------------------------------------------------------------------------------
def test_ecsv_round_trip_keeps_values_and_derives_luminosity(tmp_path):
    stars = catalogs.read_star_table(_write(_table(), tmp_path))
    assert len(stars) == 3
    np.testing.assert_array_equal(stars.distance_pc, [5.0, 10.0, 12.5])
    np.testing.assert_array_equal(stars.spectral_class, [1, 2, 3])  # G, K, M in SPECTRAL_CLASSES order
    assert list(stars.name) == ["alpha", "beta", "gamma"]
    # Sun: R = 1 R_sun, T = 5772 K gives 1 L_sun (IAU 2015 nominal values, Prsa et al. 2016, AJ 152, 41)
    assert stars.luminosity_lsun[0] == pytest.approx(1.0, rel=1e-3)
    np.testing.assert_allclose(stars.luminosity_lsun, stellar.luminosity_lsun(stars.radius_rsun, stars.teff_K))
    assert np.isnan(stars.ecliptic_latitude_deg).all()


def test_given_luminosity_is_kept_and_empty_entries_derived(tmp_path):
    lum = np.ma.MaskedArray([2.0, 0.5, 0.01], mask=[False, True, False])
    stars = catalogs.read_star_table(_write(_table(luminosity_lsun=lum), tmp_path))
    assert stars.luminosity_lsun[0] == 2.0 and stars.luminosity_lsun[2] == 0.01
    assert stars.luminosity_lsun[1] == pytest.approx(stellar.luminosity_lsun(0.7, 4500.0))


def test_table_units_are_converted(tmp_path):
    # 1 pc = 3.26156 light years (astropy units)
    table = _table(distance_pc=[10.0, 20.0, 30.0] * u.lyr, radius_rsun=[695700.0, 487000.0, 208710.0] * u.km)
    stars = catalogs.read_star_table(_write(table, tmp_path, "stars.fits"))
    np.testing.assert_allclose(stars.distance_pc, np.array([10.0, 20.0, 30.0]) / 3.26156, rtol=1e-5)
    np.testing.assert_allclose(stars.radius_rsun, [1.0, 0.7, 0.3], rtol=1e-3)  # R_sun = 695700 km (IAU 2015)


def test_csv_without_units_uses_the_column_names(tmp_path):
    path = tmp_path / "stars.csv"
    path.write_text("distance_pc,teff_K,radius_rsun,mass_msun,spectral_class,V_mag\n"
                    "3.0,5000,0.8,0.8,k,5.5\n4.0,6200,1.2,1.2,F8V,4.1\n")
    stars = catalogs.read_star_table(path)
    np.testing.assert_array_equal(stars.distance_pc, [3.0, 4.0])
    np.testing.assert_array_equal(stars.spectral_class, [2, 0])
    np.testing.assert_array_equal(stars.magnitudes["V"], [5.5, 4.1])
    assert list(stars.name) == ["star 1", "star 2"]


def test_votable_and_bare_names_with_units(tmp_path):
    table = _table()
    table.rename_column("distance_pc", "distance")
    table["distance"] = [1.0, 2.0, 3.0] * u.kpc
    table.rename_column("teff_K", "Teff")
    stars = catalogs.read_star_table(_write(table, tmp_path, "stars.vot", format="votable"))
    np.testing.assert_allclose(stars.distance_pc, [1000.0, 2000.0, 3000.0])
    np.testing.assert_array_equal(stars.teff_K, [5772.0, 4500.0, 3300.0])


# -- one-line errors: file, row, column -------------------------------------------------------------
def _error(path) -> str:
    with pytest.raises(UserInputError) as info:
        catalogs.read_star_table(path)
    message = str(info.value)
    assert "\n" not in message and info.value.exit_status == 2
    assert str(path) in message
    return message


def test_error_missing_column(tmp_path):
    table = _table()
    table.remove_column("mass_msun")
    assert "missing column 'mass_msun'" in _error(_write(table, tmp_path))


def test_error_nan(tmp_path):
    message = _error(_write(_table(teff_K=[5772.0, np.nan, 3300.0] * u.K), tmp_path))
    assert "row 2" in message and "'teff_K'" in message and "not a finite number" in message


def test_error_empty_cell_in_csv(tmp_path):
    path = tmp_path / "stars.csv"
    path.write_text("distance_pc,teff_K,radius_rsun,mass_msun,spectral_class\n3,5000,0.8,0.8,K\n4,,1.2,1.2,F\n")
    message = _error(path)
    assert "row 2" in message and "'teff_K'" in message


def test_error_text_in_numeric_column(tmp_path):
    path = tmp_path / "stars.csv"
    path.write_text("distance_pc,teff_K,radius_rsun,mass_msun,spectral_class\n3,5000,0.8,0.8,K\n4,hot,1.2,1.2,F\n")
    message = _error(path)
    assert "row 2" in message and "'teff_K'" in message and "'hot' is not a number" in message


@pytest.mark.parametrize("column, values", [
    ("distance_pc", [5.0, -1.0, 3.0]),
    ("radius_rsun", [1.0, 0.7, 0.0]),
    ("mass_msun", [1.0, -0.7, 0.3]),
])
def test_error_not_positive(tmp_path, column, values):
    message = _error(_write(_table(**{column: values}), tmp_path))
    row = 3 if values[2] <= 0 else 2
    assert f"row {row}" in message and f"'{column}'" in message and "must be > 0" in message


def test_error_unknown_spectral_class(tmp_path):
    message = _error(_write(_table(spectral_class=["G2V", "A0V", "M"]), tmp_path))
    assert "row 2" in message and "'spectral_class'" in message and "unknown spectral class 'A0V'" in message
    assert "F, G, K, M" in message


def test_error_unit_cannot_convert(tmp_path):
    message = _error(_write(_table(distance_pc=[1.0, 2.0, 3.0] * u.kg), tmp_path))
    assert "'distance_pc'" in message and "unit 'kg' cannot be converted to pc" in message


def test_error_bare_name_without_unit(tmp_path):
    path = tmp_path / "stars.csv"
    path.write_text("distance,teff_K,radius_rsun,mass_msun,spectral_class\n3,5000,0.8,0.8,K\n")
    assert "'distance': no unit given" in _error(path)


def test_error_empty_table(tmp_path):
    assert "has no rows" in _error(_write(_table()[:0], tmp_path))


def test_error_unreadable_file(tmp_path):
    path = tmp_path / "stars.fits"
    path.write_bytes(b"\x00\x01 not a table \xff" * 10)
    assert "cannot read the star list" in _error(path)


def test_error_missing_file(tmp_path):
    assert "not found" in _error(tmp_path / "nowhere.ecsv")


# -- the spec section -------------------------------------------------------------------------------
def test_section_needs_exactly_one_source():
    with pytest.raises(ValidationError):
        catalogs.StarsSection()
    with pytest.raises(ValidationError):
        catalogs.StarsSection(file="a.ecsv", synthetic={"n": 3, "radius_pc": 5.0, "seed": 1})
    with pytest.raises(ValidationError):
        catalogs.StarsSection(synthetic={"n": 3, "radius_pc": 5.0, "seed": 1, "colour": "red"})


def test_load_stars_file_relative_to_spec_and_synthetic(tmp_path):
    _write(_table(), tmp_path)
    stars = catalogs.load_stars(catalogs.StarsSection(file="stars.ecsv"), tmp_path)
    assert len(stars) == 3
    synthetic = catalogs.load_stars(catalogs.StarsSection(synthetic={"n": 50, "radius_pc": 8.0, "seed": 3}), Path("."))
    assert len(synthetic) == 50 and synthetic.distance_pc.max() <= 8.0


# -- synthetic neighbourhood ------------------------------------------------------------------------
def test_synthetic_is_deterministic_and_labelled_invented(tmp_path):
    a = catalogs.synthetic_neighbourhood(100, 15.0, seed=11)
    b = catalogs.synthetic_neighbourhood(100, 15.0, seed=11)
    c = catalogs.synthetic_neighbourhood(100, 15.0, seed=12)
    assert all(np.array_equal(a[k], b[k]) for k in a.colnames)
    assert not np.array_equal(a["distance_pc"], c["distance_pc"])
    path = tmp_path / "s.ecsv"
    catalogs.write_star_table(a, path)
    back = Table.read(path)
    assert back.meta["invented"] is True and "INVENTED" in back.meta["description"]
    assert back["distance_pc"].unit == u.pc and back["radius_rsun"].unit == u.R_sun
    stars = catalogs.read_star_table(path)
    np.testing.assert_array_equal(stars.distance_pc, a["distance_pc"])


def test_synthetic_follows_its_documented_distributions():
    n, radius = 20000, 20.0
    table = catalogs.synthetic_neighbourhood(n, radius, seed=5)
    stars = catalogs.star_table_from(table, "synthetic")
    # uniform density in a sphere: (r / R)^3 uniform on [0, 1] (KS test, scipy)
    assert scipy.stats.kstest((stars.distance_pc / radius) ** 3, "uniform").pvalue > 1e-3
    # isotropic directions: sin(ecliptic latitude) uniform on [-1, 1]
    assert scipy.stats.kstest(np.sin(np.radians(stars.ecliptic_latitude_deg)), "uniform", args=(-1, 2)).pvalue > 1e-3
    # class shares follow DEFAULT_PROPORTIONS (chi-square test, scipy)
    observed = np.bincount(stars.spectral_class, minlength=4)
    expected = n * np.array([catalogs.DEFAULT_PROPORTIONS[c] for c in SPECTRAL_CLASSES])
    assert scipy.stats.chisquare(observed, expected).pvalue > 1e-3
    # properties come from the physics module's main-sequence relations and agree with the class
    np.testing.assert_allclose(stars.radius_rsun, stellar.main_sequence_radius_rsun(stars.mass_msun))
    np.testing.assert_allclose(stars.teff_K, stellar.main_sequence_teff_K(stars.mass_msun))
    np.testing.assert_array_equal(stellar.spectral_class_code(stars.teff_K), stars.spectral_class)


def test_synthetic_proportions_option():
    table = catalogs.synthetic_neighbourhood(500, 10.0, seed=1, proportions={"G": 1.0})
    assert set(table["spectral_class"]) == {"G"}
    with pytest.raises(ValidationError):
        catalogs.SyntheticNeighbourhood(n=5, radius_pc=1.0, seed=0, proportions={"G": -1.0})


def test_demo_star_list_is_invented_and_valid():
    path = Path(__file__).resolve().parents[1] / "workflows" / "stars_demo.ecsv"
    stars = catalogs.read_star_table(path)
    assert 150 <= len(stars) <= 250 and stars.distance_pc.max() <= 20.0
    meta = Table.read(path).meta
    assert meta["invented"] is True and meta["generator"] == "sweep.catalogs.synthetic_neighbourhood"
    # it is exactly what the generator makes from the seed in its header (produced by this code)
    again = catalogs.synthetic_neighbourhood(meta["n"], meta["radius_pc"], meta["seed"])
    np.testing.assert_allclose(stars.distance_pc, again["distance_pc"], rtol=1e-15)
