"""The public API: ``spurplan.__all__``, a light import, the README's imports, one version."""

from __future__ import annotations

import ast
import importlib.metadata
import inspect
import re
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

import spurplan

ROOT = Path(__file__).resolve().parent.parent
HEAVY = ("numpy", "pandas", "scipy", "matplotlib", "skrf")


def _fresh(code: str) -> str:
    """Run ``code`` in a new interpreter (nothing imported before it); returns stdout."""
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=ROOT)
    return out.stdout.strip()


@pytest.mark.parametrize("name", spurplan.__all__)
def test_public_name_resolves_and_is_documented(name):
    obj = getattr(spurplan, name)
    assert obj is not None
    doc = inspect.getdoc(obj)
    assert doc and doc.strip(), f"spurplan.{name} has no docstring"


def test_all_has_no_duplicates_and_dir_lists_it():
    assert len(set(spurplan.__all__)) == len(spurplan.__all__)
    assert set(spurplan.__all__) <= set(dir(spurplan))


def test_unknown_name_is_an_attribute_error():
    with pytest.raises(AttributeError, match="no_such_name"):
        spurplan.no_such_name  # noqa: B018


def test_every_error_is_public():
    import spurplan.errors as errors

    classes = {
        n
        for n, o in vars(errors).items()
        if inspect.isclass(o) and issubclass(o, BaseException) and not n.startswith("_")
    }
    assert classes <= set(spurplan.__all__)
    for name in classes:
        assert getattr(spurplan, name) is getattr(errors, name)


def test_import_spurplan_pulls_in_no_heavy_library():
    # Start-up cost, as test_package.py guards for spurplan.cli (skrf's own test_init.py
    # guards the same for scikit-rf): the lazy names load their modules on first use.
    code = f"import sys, spurplan; print(','.join(m for m in {HEAVY!r} if m in sys.modules))"
    assert _fresh(code) == ""


def test_lazy_name_loads_heavy_modules_only_when_used():
    code = f"import sys, spurplan; spurplan.Lineup; print(','.join(m for m in {HEAVY!r} if m in sys.modules))"
    assert "numpy" in _fresh(code).split(",")


@pytest.mark.parametrize(
    "first",
    ["import spurplan.analyses.check, spurplan.analyses.remedy, spurplan.analyses.spur_chart", "pass"],
)
def test_public_functions_are_functions_whatever_was_imported_first(first):
    # Python binds a submodule as an attribute of its package on first import (Python
    # reference, "The import system", submodules); no public function shares its name
    # with a top-level module, so importing the analyses first changes nothing.
    code = (
        f"{first}\n"
        "import spurplan, types\n"
        "from spurplan.analyses.check import CheckResult\n"
        "names = ('check', 'remedy', 'spur_chart')\n"
        "print(all(callable(getattr(spurplan, n)) and not isinstance(getattr(spurplan, n), types.ModuleType)"
        " and getattr(spurplan, n).__module__ == 'spurplan.analyses.' + n for n in names), CheckResult.__name__)"
    )
    assert _fresh(code) == "True CheckResult"


def _readme_python_blocks() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    return re.findall(r"```python\n(.*?)```", text, flags=re.DOTALL)


def test_readme_example_imports_work():
    blocks = _readme_python_blocks()
    assert blocks, "the README has a Python example"
    imports = []
    attributes = set()
    for block in blocks:
        tree = ast.parse(block)
        for node in ast.walk(tree):
            if isinstance(node, (ast.Import, ast.ImportFrom)):
                imports.append(ast.unparse(node))
            elif (
                isinstance(node, ast.Attribute)
                and isinstance(node.value, ast.Name)
                and node.value.id == "spurplan"
            ):
                attributes.add(node.attr)
    assert any("from spurplan import" in line for line in imports), imports
    namespace: dict = {}
    for line in imports:
        exec(line, namespace)  # each import line as the README writes it
    for line in imports:
        if line.startswith("from spurplan import"):
            for name in line.removeprefix("from spurplan import").split(","):
                assert name.strip() in spurplan.__all__
    for name in attributes:
        assert name in spurplan.__all__ or name == "__version__", f"README uses spurplan.{name}"


def test_installed_version_is_the_package_version():
    # One version string: the installed metadata (importlib.metadata, Python library
    # reference) is built from __version__ by hatchling's [tool.hatch.version].
    assert importlib.metadata.version("spurplan") == spurplan.__version__


def test_pyproject_takes_the_version_from_the_package():
    # PEP 621: a field the backend fills in is listed in [project] dynamic and not given.
    pyproject = ROOT / "pyproject.toml"
    if not pyproject.is_file():
        pytest.skip("not a source checkout")
    data = tomllib.loads(pyproject.read_text(encoding="utf-8"))
    assert "version" in data["project"].get("dynamic", [])
    assert "version" not in data["project"]
    assert data["tool"]["hatch"]["version"]["path"] == "spurplan/__init__.py"
    source = (ROOT / "spurplan" / "__init__.py").read_text(encoding="utf-8")
    assert len(re.findall(r"^__version__ = ", source, flags=re.MULTILINE)) == 1
