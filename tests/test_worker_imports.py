"""A dask worker evaluates the planet-yield model without loading the client's heavy libraries.

Worker processes import ``sweep.engine.WORKER_PRELOAD`` as they start and then unpickle the model
the client built. Each start pays for every module imported, so the modules a worker needs must
not pull in scipy.stats, astropy.table/astropy.io (used on the client to validate the spec and read
tables) nor the analysis stack (common practice: start-up cost of worker processes).
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import cloudpickle
import pytest

from sweep.design import build_rows
from sweep.spec import load_spec

WORKFLOWS = Path(__file__).resolve().parent.parent / "workflows"

#: Modules a worker must not import (common practice: start-up cost of worker processes).
FORBIDDEN = ("scipy.stats", "astropy.table", "astropy.io", "xarray", "pandas", "matplotlib", "dask.array")

#: Rows of the block evaluated in the worker-like process.
BLOCK_ROWS = 4

_WORKER = textwrap.dedent("""\
    import pickle, sys
    import numpy as np
    {imports}
    with open(sys.argv[1], "rb") as f:
        model, block = pickle.load(f)
    out = model.evaluate(block)
    assert out and all(np.asarray(v).shape[0] == len(block) for v in out.values()), "bad output"
    forbidden = {forbidden!r}
    loaded = sorted(m for m in sys.modules if any(m == f or m.startswith(f + ".") for f in forbidden))
    print("LOADED:" + ",".join(loaded))
""")


def _loaded_in_fresh_process(imports: str, payload_path: Path | None = None) -> list[str]:
    """Forbidden modules loaded by a fresh interpreter that runs ``imports`` (and evaluates the
    pickled model and block at ``payload_path``, when given)."""
    if payload_path is None:
        code = "\n".join([
            "import sys", imports,
            f"forbidden = {FORBIDDEN!r}",
            "loaded = sorted(m for m in sys.modules if any(m == f or m.startswith(f + '.') for f in forbidden))",
            "print('LOADED:' + ','.join(loaded))",
        ])
        args = [sys.executable, "-c", code]
    else:
        args = [sys.executable, "-c", _WORKER.format(imports=imports, forbidden=FORBIDDEN), str(payload_path)]
    done = subprocess.run(args, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    line = [text for text in done.stdout.splitlines() if text.startswith("LOADED:")][-1]
    return [name for name in line[len("LOADED:"):].split(",") if name]


@pytest.mark.parametrize("workflow", ["demo.toml", "noise_budget.toml", "binned_rates.toml"])
def test_worker_evaluates_model_without_heavy_imports(workflow, tmp_path):
    spec = load_spec(WORKFLOWS / workflow)
    model = spec.build_model()
    block = build_rows(spec).block(0, BLOCK_ROWS)
    payload = tmp_path / "model.pkl"
    payload.write_bytes(cloudpickle.dumps((model, block)))
    loaded = _loaded_in_fresh_process("import sweep.model, sweep.testfunctions", payload)
    assert loaded == []  # common practice (start-up cost of worker processes)


def test_store_import_is_light():
    loaded = _loaded_in_fresh_process("import sweep.store")
    assert loaded == []  # common practice (start-up cost of worker processes)


def test_command_line_parser_is_light():
    # `sweep run` starts its workers right after parsing its arguments, before the heavy imports
    # that validating the spec needs: the parser of every command must not load them.
    loaded = _loaded_in_fresh_process("import sweep.cli; sweep.cli.build_parser()")
    assert loaded == []  # common practice (start-up cost of a command-line tool)
