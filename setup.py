"""The package layout, which pyproject.toml cannot state by itself (everything else lives there).

migrations/ and templates/ stay at the top of the repository, where Alembic and contributors look for them, and
ship inside the wheel as fleet/_migrations and fleet/_templates; fleet.resources finds either place at run time.
Packages are discovered rather than listed, so a new subpackage ships without touching this file.
"""

from setuptools import find_namespace_packages, setup

DATA_FOLDERS = {"fleet._migrations": "migrations", "fleet._templates": "templates"}
# Files besides Python modules that fleet reads at run time: page templates, styles, scripts, the rounds app's
# manifest and icon, Alembic's revision template.
DATA_PATTERNS = ["*.html", "*.css", "*.js", "*.mako", "*.webmanifest", "*.svg"]


def packages() -> list[str]:
    # Namespace discovery also picks up folders without __init__.py (fleet/web/static, the data folders below).
    found = find_namespace_packages(include=["fleet", "fleet.*", "seed_demo", "seed_demo.*"])
    for package, folder in DATA_FOLDERS.items():
        found += [package] + [f"{package}.{sub}" for sub in find_namespace_packages(where=folder)]
    return [name for name in found if "__pycache__" not in name]


if __name__ == "__main__":  # setuptools runs this file as a script; tests import packages()
    setup(packages=packages(), package_dir=DATA_FOLDERS, package_data={"": DATA_PATTERNS})
