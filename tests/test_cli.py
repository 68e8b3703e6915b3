"""The command line: version, help, and the one-line error contract."""

import subprocess
import sys

import sweep
from sweep.cli import main


def test_version_matches_package(capsys):
    try:
        main(["--version"])
    except SystemExit as exc:
        assert exc.code == 0
    assert capsys.readouterr().out.strip() == f"sweep {sweep.__version__}"


def test_python_dash_m_prints_help():
    done = subprocess.run([sys.executable, "-m", "sweep", "--help"], capture_output=True, text=True)
    assert done.returncode == 0
    assert "usage: sweep" in done.stdout
