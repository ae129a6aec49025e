"""The wheel carries what fleet reads at run time, and fleet finds it installed or in a checkout.

The full proof (build the wheel, install it into a fresh venv, run `fleet demo --no-serve` and `fleet analyze` in
an empty folder) needs the package index, so it is a CI step: .ci/wheel-check.
"""

import importlib.util
from pathlib import Path

import pytest

from fleet.resources import find_folder, folder

ROOT = Path(__file__).resolve().parents[1]


def _setup_module():
    spec = importlib.util.spec_from_file_location("fleet_setup", ROOT / "setup.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)  # defines packages(); setup() runs only as a script
    return module


def test_every_code_and_data_folder_is_a_package_of_the_wheel(monkeypatch):
    monkeypatch.chdir(ROOT)  # setuptools discovers relative to the project, as the build does
    setup = _setup_module()
    packages = set(setup.packages())
    code = {".".join(p.parent.relative_to(ROOT).parts) for top in ("fleet", "seed_demo")
            for p in (ROOT / top).rglob("__init__.py")}
    assert code <= packages
    assert {"fleet.web.static", "fleet._migrations", "fleet._migrations.versions", "fleet._templates"} <= packages
    for sub in (p for p in (ROOT / "templates").iterdir() if p.is_dir()):
        assert f"fleet._templates.{sub.name}" in packages
    assert not [p for p in packages if "__pycache__" in p]
    # Every kind of non-Python file the folders hold is packed.
    suffixes = {p.suffix for top in ("templates", "migrations", "fleet/web/static") for p in (ROOT / top).rglob("*")
                if p.is_file() and p.suffix != ".py" and "__pycache__" not in p.parts}
    assert {f"*{s}" for s in suffixes} <= set(setup.DATA_PATTERNS)


def test_a_checkout_finds_its_top_level_folders():
    assert folder("migrations") == ROOT / "migrations"
    assert folder("templates") == ROOT / "templates"


def test_an_installed_package_finds_the_folders_packed_inside_it(tmp_path):
    package = tmp_path / "site-packages" / "fleet"
    (package / "_migrations").mkdir(parents=True)
    (tmp_path / "site-packages" / "migrations").mkdir()  # someone else's top-level folder is never taken
    assert find_folder(package, "migrations") == package / "_migrations"


def test_a_top_level_folder_outside_a_checkout_is_not_fleets(tmp_path):
    package = tmp_path / "site-packages" / "fleet"
    package.mkdir(parents=True)
    (tmp_path / "site-packages" / "templates").mkdir()
    with pytest.raises(FileNotFoundError, match="templates folder is missing"):
        find_folder(package, "templates")
