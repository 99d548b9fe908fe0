"""Every public function with two or more parameters documents them, numpydoc style.

The rule follows the numpydoc docstring guide (numpydoc.readthedocs.io, "Style guide",
sections "Parameters" and "Returns"; from memory): a section header is its name on one
line followed by a line of dashes, and each parameter starts a line ``name : type``.
Units are written in the descriptions by convention (DEVELOPERS.md); the test cannot
read prose, so it checks the structure only.
"""

from __future__ import annotations

import importlib
import inspect
import pkgutil
import re

import pytest

import spurplan

# Modules whose docstrings are still to be completed (issue 13, "numpydoc
# Parameters/Returns with units on every public function"): every other module of the
# package, new ones included, is held to the rule.  Remove a module from this list once
# its public functions pass; test_to_do_is_current says when.
TO_DO: set[str] = set()


def _modules():
    names = [spurplan.__name__]
    names += [info.name for info in pkgutil.walk_packages(spurplan.__path__, spurplan.__name__ + ".")]
    return sorted(names)


def _is_click_command(obj) -> bool:
    # click's decorators replace the function with a Command object; its help is the
    # docstring, so the numpydoc sections do not apply (spurplan/cli.py).
    try:
        import click
    except ImportError:  # pragma: no cover - click is a core dependency
        return False
    return isinstance(obj, click.Command)


def _public_callables(module):
    """(qualified name, function) for the public functions and methods defined in module."""
    out = []
    for name, obj in vars(module).items():
        if name.startswith("_") or _is_click_command(obj):
            continue
        if inspect.isfunction(obj) and obj.__module__ == module.__name__:
            out.append((name, obj))
        elif inspect.isclass(obj) and obj.__module__ == module.__name__:
            for meth_name, meth in vars(obj).items():
                if meth_name.startswith("_"):
                    continue
                func = meth
                if isinstance(meth, (staticmethod, classmethod)):
                    func = meth.__func__
                if inspect.isfunction(func) and func.__module__ == module.__name__:
                    out.append((f"{name}.{meth_name}", func))
    return out


def _parameters(func) -> list[str]:
    sig = inspect.signature(func)
    return [
        p.name
        for p in sig.parameters.values()
        if p.name not in ("self", "cls")
        and p.kind not in (inspect.Parameter.VAR_POSITIONAL, inspect.Parameter.VAR_KEYWORD)
    ]


def _section(doc: str, title: str) -> str | None:
    """The body of a numpydoc section, or None when the docstring has none."""
    lines = inspect.cleandoc(doc).splitlines()
    for i in range(len(lines) - 1):
        if lines[i].strip() == title and re.fullmatch(r"-{3,}", lines[i + 1].strip()):
            body = []
            for j in range(i + 2, len(lines)):
                # The next section starts where a line is followed by dashes.
                if j + 1 < len(lines) and re.fullmatch(r"-{3,}", lines[j + 1].strip()):
                    break
                body.append(lines[j])
            return "\n".join(body)
    return None


def _returns_value(func) -> bool:
    ann = inspect.signature(func).return_annotation
    return ann is not inspect.Signature.empty and ann not in (None, "None")


def problems(module_name: str) -> list[str]:
    module = importlib.import_module(module_name)
    found = []
    for qualname, func in _public_callables(module):
        params = _parameters(func)
        if len(params) < 2:
            continue
        where = f"{module_name}.{qualname}"
        doc = func.__doc__ or ""
        section = _section(doc, "Parameters")
        if section is None:
            found.append(f"{where}: no Parameters section")
            continue
        for p in params:
            # numpydoc allows "x, y : float" for parameters sharing a description.
            pattern = rf"^\s*(\w+\s*,\s*)*{re.escape(p)}\s*(,\s*\w+\s*)*(:|$)"
            if not re.search(pattern, section, re.MULTILINE):
                found.append(f"{where}: parameter {p!r} not in Parameters")
        if _returns_value(func) and _section(doc, "Returns") is None:
            found.append(f"{where}: no Returns section")
    return found


@pytest.mark.parametrize("module_name", [m for m in _modules() if m not in TO_DO])
def test_numpydoc_sections(module_name):
    assert problems(module_name) == []


def test_to_do_is_current():
    # A module on the list must exist and still fall short: a finished or renamed one
    # is taken off, so that the rule holds for it from then on.
    modules = set(_modules())
    assert modules >= TO_DO, TO_DO - modules
    finished = sorted(m for m in TO_DO if not problems(m))
    assert finished == [], f"remove from TO_DO: {finished}"


def test_checker_catches_missing_sections():
    # The checker itself: a function missing a parameter and its Returns is reported.
    import types

    mod = types.ModuleType("spurplan_fake_docs")

    def good(freq_hz: float, level_dbm: float) -> float:
        """Doc.

        Parameters
        ----------
        freq_hz : float
            Frequency (Hz).
        level_dbm : float
            Level (dBm).

        Returns
        -------
        float
        """
        return 0.0

    def bad(freq_hz: float, level_dbm: float) -> float:
        """Doc.

        Parameters
        ----------
        freq_hz : float
            Frequency (Hz).
        """
        return 0.0

    for f in (good, bad):
        f.__module__ = mod.__name__
        setattr(mod, f.__name__, f)
    import sys

    sys.modules[mod.__name__] = mod
    try:
        assert problems(mod.__name__) == [
            "spurplan_fake_docs.bad: parameter 'level_dbm' not in Parameters",
            "spurplan_fake_docs.bad: no Returns section",
        ]
    finally:
        del sys.modules[mod.__name__]
