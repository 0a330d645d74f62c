"""What ``pip install .`` puts in a wheel: every package of the source tree.

The tests run on an editable install, which finds any package in the tree; a wheel holds
only the packages ``pyproject.toml`` names, so a new subpackage missing there breaks the
README's first command on a fresh machine (it did: ``align.markers``).
"""

import tomllib

from conftest import ROOT


def test_every_package_in_the_tree_is_in_the_wheel():
    config = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    named = set(config["packages"])
    in_tree = {".".join(init.parent.relative_to(ROOT).parts)
               for top in ("align", "api") for init in (ROOT / top).rglob("__init__.py")}
    assert in_tree <= named, f"packages missing from pyproject.toml: {sorted(in_tree - named)}"
    folders = config.get("package-dir", {})
    for package in named - in_tree:
        assert (ROOT / folders[package]).is_dir(), package
