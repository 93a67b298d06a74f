"""The installed package holds every subpackage of the source tree.

pyproject.toml lists the packages by name (the configs folder ships under another name), so a new
subpackage missing from the list would pass every test in an editable checkout and fail only in a
clean install.
"""

import os
import tomllib

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def test_every_subpackage_is_listed_in_pyproject():
    with open(os.path.join(ROOT, "pyproject.toml"), "rb") as handle:
        listed = set(tomllib.load(handle)["tool"]["setuptools"]["packages"])
    found = {os.path.relpath(folder, ROOT).replace(os.sep, ".")
             for folder, _, names in os.walk(os.path.join(ROOT, "assimbench")) if "__init__.py" in names}
    assert found, "no package found"
    assert found <= listed, f"packages missing from pyproject.toml: {sorted(found - listed)}"
