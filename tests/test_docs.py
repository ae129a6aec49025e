"""The README and the program agree: every command is documented, every CSV column the importer knows is listed."""

import re
from pathlib import Path

from click.testing import CliRunner

from fleet.cli import main
from fleet.io.columns import KINDS

README = (Path(__file__).resolve().parents[1] / "README.md").read_text()


def test_every_command_is_in_the_readme_table():
    commands = set(main.commands)
    documented = set(re.findall(r"^\| `fleet ([\w-]+)", README, flags=re.MULTILINE))
    assert commands == documented


def test_every_csv_column_is_in_the_readme():
    for kind, columns in KINDS.items():
        line = next(line for line in README.splitlines() if line.startswith(f"- **{kind}**"))
        start = README.index(line)
        block = README[start:README.find("\n- **", start + 1)]
        for column in columns:
            assert re.search(rf"\b{column.name}\b", block), (kind, column.name)


def test_readme_has_the_two_commands_and_the_safety_section():
    assert "python3 -m pip install -e . && python3 -m fleet demo" in README
    assert "\n    bash .ci/run\n" in README
    assert "## Safety" in README and "accumulators" in README and "injection" in README
    assert "invented" in README.lower()


def test_help_runs():
    result = CliRunner().invoke(main, ["--help"])
    assert result.exit_code == 0 and "import" in result.output


def test_import_and_export_read_as_the_readme_writes_them():
    """`fleet import KIND FILE` in the README is what `--help` shows (not click's list of choices, wrapped
    mid-word), and the help names every KIND."""
    for command in ("import", "export"):
        assert f"| `fleet {command} KIND FILE" in README
        result = CliRunner().invoke(main, [command, "--help"], prog_name="fleet", terminal_width=80)
        assert result.exit_code == 0
        assert result.output.splitlines()[0] == f"Usage: fleet {command} [OPTIONS] KIND FILE"
        listed = re.search(r"KIND: ([\w ,]+)\.", " ".join(result.output.split())).group(1)
        assert set(re.split(r", | or ", listed)) == set(KINDS)
