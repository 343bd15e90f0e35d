"""Every subpackage of the source tree is installed: the tests import from the checkout, so a
subpackage missing from pyproject.toml would only break the installed command."""
import sys
from pathlib import Path

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

ROOT = Path(__file__).resolve().parent.parent


def test_every_subpackage_is_listed_in_pyproject():
    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    found = {".".join(p.parent.relative_to(ROOT).parts) for p in (ROOT / "wavecal").rglob("__init__.py")}
    assert found <= listed, f"not installed: {sorted(found - listed)}"
