"""`fleet --help` starts like a tool: importing the command and asking any command for help loads none of the heavy
libraries; each command imports them in its own body. (The start-up time itself is a benchmark figure:
benchmarks/startup.py.)"""

import json
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
HEAVY = {"pandas", "numpy", "scipy", "alembic", "sqlalchemy", "plotly", "flask", "pint", "argon2", "waitress",
         "seed_demo"}


def _loaded_after(code: str) -> list[str]:
    """Heavy top-level packages loaded after ``code`` runs in a fresh interpreter on this checkout."""
    probe = f"{code}\nimport json, sys\nprint(json.dumps(sorted({{m.split('.')[0] for m in sys.modules}})))"
    done = subprocess.run([sys.executable, "-c", probe], cwd=ROOT, capture_output=True, text=True, timeout=60,
                          check=False)
    assert done.returncode == 0, done.stderr
    return sorted(HEAVY & set(json.loads(done.stdout.strip().splitlines()[-1])))


def test_importing_the_command_loads_no_heavy_library():
    assert _loaded_after("import fleet.cli") == []


def test_help_of_every_command_loads_no_heavy_library():
    # Every command path (user add, ...) asked for --help in one process: click runs the group callback first.
    code = """
import contextlib, io
import click
from fleet.cli import main

def paths(group, prefix=()):
    yield prefix
    for name, command in group.commands.items():
        if isinstance(command, click.Group):
            yield from paths(command, prefix + (name,))
        else:
            yield prefix + (name,)

for path in list(paths(main)):
    with contextlib.redirect_stdout(io.StringIO()) as out:
        main([*path, "--help"], prog_name="fleet", standalone_mode=False)
    assert "Usage: fleet" in out.getvalue(), path
"""
    assert _loaded_after(code) == []


def test_a_command_still_loads_what_it_needs(tmp_path):
    url = f"sqlite:///{tmp_path / 'empty.sqlite'}"
    code = f"""
from fleet.cli import main
main(["--database", "{url}", "init"], prog_name="fleet", standalone_mode=False)
"""
    assert {"alembic", "sqlalchemy"} <= set(_loaded_after(code))
