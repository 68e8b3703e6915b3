"""The report (sweep.report): figures, tables, the HTML page checked in headless Chromium, and
the `sweep report` command, on synthetic cubes that follow the cube contract."""

import csv
import io
import json
import os
import re
import shutil
import subprocess

import numpy as np
import pytest
import xarray as xr
from scipy.stats import qmc

from sweep.cli import main
from sweep.report import build_report
from sweep.report.tables import Table

CATEGORIES = {"radius_bin": ["0.5-1", "1-1.75", "1.75-3.5"], "teq_bin": ["cold", "temperate", "hot"],
              "spectral_class": ["G", "K", "M"]}


def planet_cube(m=5, seed=3):
    """An invented planet-model cube in the contract's layout (Saltelli rows, block-major; one
    grid axis; two concepts, three channels; three category axes). Numbers are made up."""
    n = 2 ** m
    inputs = ["occurrence", "instrument.throughput", "population"]
    u = qmc.Sobol(d=4, scramble=True, seed=np.random.default_rng(seed)).random_base2(m)
    A, B = u[:, :2], u[:, 2:]
    blocks, labels, sources = [A, B], ["A", "B"], [0, 1]
    for j, name in enumerate(inputs):
        ab = A.copy()
        if j < 2:
            ab[:, j] = B[:, j]
        blocks.append(ab)
        labels.append(f"AB:{name}")
        sources.append(1 if name == "population" else 0)
    X = np.concatenate(blocks)
    base, source = np.tile(np.arange(n), len(blocks)), np.repeat(sources, n)
    scale, throughput = 0.5 + X[:, 0], 0.2 + 0.6 * X[:, 1]
    rate = np.broadcast_to(np.array([[1.0, 2, 3], [0.5, 1, 1.5], [0.3, 0.6, 0.9]])[..., None],
                           (3, 3, 3))
    present = np.stack([np.random.default_rng([seed, b, s]).poisson(rate * k)
                        for b, s, k in zip(base, source, scale)]).astype(np.uint32)
    aperture = np.array([4.0, 6.0, 8.0])
    p = np.clip(throughput[:, None, None] * aperture[:, None] / 8 * np.array([1.0, 0.6]), 0, 1)
    det_any = np.floor(present[:, None, None] * p[..., None, None, None]).astype(np.uint32)
    detected = np.stack([det_any[:, :, 0], det_any[:, :, 0] // 2, det_any[:, :, 1]], axis=2)
    total = det_any.sum(axis=(3, 4, 5))
    multiplicity = np.stack([present.sum(axis=(1, 2, 3))[:, None, None] - total,
                             total - total // 2, total // 2], axis=-1).astype(np.uint32)
    crit_present = np.stack([present[:, :, 1].sum(axis=(1, 2)), present[:, 0].sum(axis=(1, 2))], -1)
    crit_detected = np.stack([det_any[:, :, :, :, 1].sum(axis=(3, 4)),
                              det_any[:, :, :, 0].sum(axis=(3, 4))], axis=-1)
    cats, grid = tuple(CATEGORIES), ("telescope.aperture_m",)
    counts = {"units": "planets"}
    ds = xr.Dataset(
        {"present": (("row",) + cats, present, dict(counts, description="planets drawn")),
         "detected": (("row",) + grid + ("channel",) + cats, detected,
                      dict(counts, description="planets detected in that band")),
         "detected_any": (("row",) + grid + ("concept",) + cats, det_any,
                          dict(counts, description="detected in at least one band")),
         "band_multiplicity": (("row",) + grid + ("concept", "n_bands"), multiplicity,
                               dict(counts, description="planets by number of bands")),
         "criterion_present": (("row", "criterion"), crit_present.astype(np.uint32), counts),
         "criterion_detected": (("row",) + grid + ("concept", "criterion"),
                                crit_detected.astype(np.uint32), counts)},
        coords={"block": ("row", np.repeat(labels, n)), "base_index": ("row", base),
                "occurrence.scale": ("row", scale, {"units": "1"}),
                "instrument.throughput": ("row", throughput, {"units": "1"}),
                "telescope.aperture_m": ("telescope.aperture_m", aperture, {"units": "m"}),
                "concept": ["wide", "deep"], "channel_concept": ("channel", ["wide", "wide", "deep"]),
                "band": ("channel", ["vis", "nir", "vis"]), "n_bands": [0, 1, 2],
                "criterion": ["temperate", "small"], **CATEGORIES})
    ds.attrs = dict(mode="saltelli", base_rows=n, seed=seed, block_rows=n // 2,
                    spec_text='[run]\nname = "invented-demo"  # <invented> & made up\n',
                    spec_hash="ab" * 32, sweep_version="0.1.0", created="2026-12-02T00:00:00Z",
                    sobol_inputs=json.dumps(inputs), grid_axes=json.dumps(list(grid)),
                    factors=json.dumps([{"name": "occurrence.scale", "group": "occurrence",
                                         "unit": "1"},
                                        {"name": "instrument.throughput", "group": None,
                                         "unit": "1"}]))
    return ds


def function_cube(rows=256, mode="monte-carlo", seed=5):
    """A test-function cube (one float variable y) in Monte Carlo mode."""
    y = np.random.default_rng(seed).normal(3.0, 1.0, rows)
    ds = xr.Dataset({"y": ("row", y, {"units": "1", "description": "test function"})},
                    coords={"block": ("row", np.full(rows, "MC")),
                            "base_index": ("row", np.arange(rows))})
    ds.attrs = dict(mode=mode, rows=rows, block_rows=32, seed=seed, spec_text="[run]\n",
                    spec_hash="cd" * 32, sweep_version="0.1.0", created="2026-12-02",
                    grid_axes="[]")
    return ds


FIGURES = ["yield_vs_telescope_aperture_m", "radius_teq_grid", "band_multiplicity",
           "sobol_indices", "sobol_convergence", "yield_distribution"]


@pytest.fixture(scope="module")
def planet_report(tmp_path_factory):
    out = tmp_path_factory.mktemp("report")
    return build_report(planet_cube(), out, name="invented-demo.zarr", n_resamples=99)


def test_report_writes_every_figure_and_table(planet_report):
    out = planet_report.parent
    for name in FIGURES:
        assert (out / f"{name}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert (out / f"{name}.pdf").read_bytes()[:5] == b"%PDF-"
    for stem in ("summary_detected_any", "summary_band_multiplicity", "sensitivity_detected_any"):
        assert (out / f"{stem}.md").read_text().startswith("### ")
        tex = (out / f"{stem}.tex").read_text()
        assert "\\toprule" in tex and "\\bottomrule" in tex and "telescope.aperture\\_m" in tex
        rows = list(csv.reader(io.StringIO((out / f"{stem}.csv").read_text())))
        assert len(rows) > 1 and len({len(r) for r in rows}) == 1
    sens = list(csv.DictReader(io.StringIO((out / "sensitivity_detected_any.csv").read_text())))
    # 3 grid points x 2 concepts x 3 inputs
    assert len(sens) == 18 and {"S1 interval low", "ST interval high"} <= set(sens[0])


def test_page_shows_spec_provenance_and_notes(planet_report):
    page = planet_report.read_text()
    for name in FIGURES:
        assert f'src="{name}.png"' in page and f'href="{name}.pdf"' in page
    assert "&lt;invented&gt; &amp; made up" in page  # the spec text, escaped
    assert "ab" * 32 in page and "invented-demo.zarr" in page
    assert "no better knowledge could remove" in page
    assert re.search(r"all 64 independent rows present", page)


def chromium():
    return shutil.which("chromium") or shutil.which("chromium-browser")


def image_check(page, tmp_path):
    """Load a page in headless Chromium; return the data-ok flag its inline script wrote."""
    profile = tmp_path / f"profile-{page.parent.name}"
    done = subprocess.run(
        [chromium(), "--headless", "--no-sandbox", "--disable-gpu",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--no-first-run", f"--user-data-dir={profile}", "--dump-dom", page.as_uri()],
        capture_output=True, text=True, timeout=120)
    match = re.search(r'id="image-check"[^>]*data-ok="(\w+)"', done.stdout)
    assert match, done.stderr[-2000:]
    return match.group(1)


@pytest.mark.browser
def test_every_image_loads_in_headless_chromium(planet_report, tmp_path):
    if not chromium():
        if os.environ.get("SWEEP_REQUIRE_ALL") == "1":
            pytest.fail("chromium is not installed and SWEEP_REQUIRE_ALL=1")
        pytest.skip("chromium not installed (Debian package chromium)")
    assert image_check(planet_report, tmp_path) == "true"
    # the check can fail: the same page with one image missing reports it
    broken = tmp_path / "broken"
    shutil.copytree(planet_report.parent, broken)
    (broken / "radius_teq_grid.png").unlink()
    assert image_check(broken / "index.html", tmp_path) == "false"


def test_monte_carlo_report_with_missing_rows_says_so(tmp_path):
    ds = function_cube()
    mask = np.ones(256, bool)
    mask[32:64] = False
    page = build_report(ds, tmp_path, rows_complete=mask, name="mc.zarr")
    text = page.read_text()
    assert "224 of 256 independent rows present (32 missing)" in text
    assert "Sobol indices need a cube made in mode" in text
    assert (tmp_path / "yield_distribution.png").exists()
    assert not (tmp_path / "sobol_indices.png").exists()


def test_report_command_on_a_saltelli_cube_with_a_missing_block(monkeypatch, tmp_path, capsys):
    ds = planet_cube(m=4)
    mask = np.ones(ds.sizes["row"], bool)
    mask[-8:] = False  # the last block of AB:population rows
    monkeypatch.setattr("sweep.analysis.load_cube", lambda path: (ds, mask))
    out = tmp_path / "rep"
    assert main(["report", "cube.zarr", "--out", str(out), "--resamples", "49"]) == 0
    assert capsys.readouterr().out.strip() == str(out / "index.html")
    text = (out / "index.html").read_text()
    assert "Sobol indices not shown" in text and "AB:population" in text
    assert (out / "summary_detected_any.csv").exists()


def test_table_formats():
    table = Table("Yield_% & more", ["concept", "median", "95 %"],
                  [["wide", 12.0, (3.0, 20.5)], ["deep", 0.125, (None, 1.0)]], ["a note"])
    latex = table.latex()
    assert latex.startswith("% Yield_% & more\n% a note\n")  # title and notes as comments
    assert "95 \\%" in latex and "3--20.5" in latex and "n/a--1" in latex
    assert latex.count("\\\\") == 3 and "{lrr}" in latex
    rows = list(csv.reader(io.StringIO(table.csv())))
    assert rows[0] == ["concept", "median", "95 % low", "95 % high"]
    assert rows[1] == ["wide", "12.0", "3.0", "20.5"] and rows[2][2] == ""
    md = table.markdown()
    assert "| wide | 12 | 3\u201320.5 |" in md and "*a note*" in md
    text = table.text().splitlines()
    assert text[0] == "Yield_% & more" and "0.125" in text[4]
    assert "<caption>Yield_% &amp; more</caption>" in table.html()
