"""The README's two commands: present, fenced, and the test command is the one CI runs."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def readme_commands():
    text = (ROOT / "README.md").read_text()
    return re.findall(r"```bash\n(.+?)\n```", text, flags=re.S)


def test_readme_opens_with_two_commands():
    commands = readme_commands()
    assert len(commands) >= 2
    run_command, test_command = commands[0], commands[1]
    assert "sweep" in run_command
    assert "pytest" in test_command


def test_ci_runs_the_readme_test_command_verbatim():
    test_command = readme_commands()[1]
    ci_lines = (ROOT / ".ci" / "run").read_text().splitlines()
    assert test_command in ci_lines
