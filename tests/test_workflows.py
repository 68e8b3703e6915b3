"""Every sweep definition shipped in workflows/ validates and evaluates a first block.

These are the examples users copy; a schema change that breaks one must fail here.
"""

from pathlib import Path

import numpy as np
import pytest

from sweep.design import build_rows
from sweep.spec import load_spec

WORKFLOWS = sorted((Path(__file__).resolve().parents[1] / "workflows").glob("*.toml"))


@pytest.mark.parametrize("path", WORKFLOWS, ids=[p.stem for p in WORKFLOWS])
def test_workflow_evaluates_its_first_block(path):
    spec = load_spec(path)
    rows = build_rows(spec)
    model = spec.build_model()
    block = rows.block(0, min(spec.run.block_rows, 4))
    arrays = model.evaluate(block)
    declared = {variable.name: variable for variable in model.outputs()}
    assert set(arrays) == set(declared)
    for name, array in arrays.items():
        assert array.shape[0] == len(block)
        assert array.dtype == np.dtype(declared[name].dtype)


def test_the_demo_and_the_examples_the_readme_names_exist():
    names = {path.name for path in WORKFLOWS}
    for expected in ("demo.toml", "monte_carlo.toml", "binned_rates.toml", "ishigami.toml", "sobol_g.toml"):
        assert expected in names
