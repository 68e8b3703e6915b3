"""The README's commands and quoted outputs are what the tool does today.

The run command's `sweep run workflows/demo.toml --report` is run for real (into a temporary
folder), and the quoted terminal lines, the quoted error and the Python example are checked
against what the tool prints.
"""

from __future__ import annotations

import os
import re
import shlex
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text()
SWEEP = [sys.executable, "-m", "sweep"]


def fenced(language: str) -> list[str]:
    return re.findall(rf"```{language}\n(.+?)\n```", README, flags=re.S)


def sweep(*args, cwd=ROOT):
    return subprocess.run([*SWEEP, *map(str, args)], capture_output=True, text=True, cwd=cwd,
                          env=dict(os.environ, PYTHONPATH=str(ROOT)), timeout=600)


def test_readme_opens_with_the_run_and_the_test_command():
    run_command, test_command = fenced("bash")[:2]
    assert run_command.endswith(".venv/bin/sweep run workflows/demo.toml --report")
    assert test_command.endswith(".venv/bin/python -m pytest")


def test_ci_runs_the_readme_test_command_verbatim():
    test_command = fenced("bash")[1]
    assert test_command in (ROOT / ".ci" / "run").read_text().splitlines()


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    """The README's run command (the sweep part), into a temporary store."""
    run_command = fenced("bash")[0]
    sweep_args = shlex.split(run_command.split(".venv/bin/sweep ", 1)[1])
    store = tmp_path_factory.mktemp("demo") / "demo.zarr"
    done = sweep(*sweep_args, "--output", store, "--quiet")
    assert done.returncode == 0, done.stderr
    return store, done.stdout


@pytest.mark.timeout(900)
def test_demo_run_prints_what_the_readme_quotes(demo_run):
    store, stdout = demo_run
    quoted = next(block for block in fenced("text") if "report:" in block)

    def normalise(text, store_path):
        text = text.replace(str(store_path), "STORE").replace(str(store_path.with_name("demo-report")), "REPORT")
        text = text.replace("results/demo.zarr", "STORE").replace("results/demo-report", "REPORT")
        return re.sub(r"in \d+(\.\d+)? s", "in T s", text).strip()

    assert normalise(stdout, store) == normalise(quoted, store)
    assert (store.with_name("demo-report") / "index.html").is_file()


@pytest.mark.timeout(900)
def test_readme_python_example_runs(demo_run):
    store, _ = demo_run
    code = next(block for block in fenced("python") if "open_cube" in block)
    code = code.replace('"results/demo.zarr"', repr(str(store)))
    exec(compile(code, "README.md", "exec"), {})


def test_readme_quoted_spec_error_is_what_sweep_prints(tmp_path):
    quoted = next(block for block in fenced("text") if "error:" in block)
    assert sweep("init", "my_study.toml", cwd=tmp_path).returncode == 0
    spec = tmp_path / "my_study.toml"
    spec.write_text(re.sub(r"^block_rows = ", "block_row = ", spec.read_text(), flags=re.M))
    done = sweep("plan", "my_study.toml", cwd=tmp_path)
    assert done.returncode == 2
    assert done.stderr.strip() == quoted.strip()


@pytest.mark.timeout(900)
def test_readme_quoted_summary_is_what_sweep_prints_for_the_demo(demo_run):
    # The demo cube is deterministic, so its summary is too (produced by this code; regenerate the
    # README's block with `sweep summary results/demo.zarr` when the model changes on purpose).
    store, _ = demo_run
    quoted = next(block for block in fenced("text") if block.startswith("detected_any [planets], total"))
    done = sweep("summary", store)
    assert done.returncode == 0, done.stderr
    assert done.stdout.startswith(quoted + "\n")
