"""The exception tree: one module, builtin bases, pickling, and the CLI's one-line contract.

Yield batches run on Dask workers, whose exceptions come back pickled; the Python
library reference (pickle, "Pickling Class Instances": ``object.__reduce__``) says an
exception is rebuilt by calling its class with ``self.args``, which a dataclass
``__init__`` never sets, so each class is held to a real round trip here.
"""

from __future__ import annotations

import dataclasses
import importlib
import inspect
import pickle
import pkgutil
import re
from pathlib import Path

import pytest
from helpers import assert_one_error_line, run_in_process

import spurplan
import spurplan.errors as errors

# Every error class, one instance with every field set to a value other than its
# default, and the builtin it stands for (errors.py docstring: ValueError for bad
# input, OSError for files that cannot be written or found).
CASES = {
    "SpurplanError": (errors.SpurplanError("something is wrong"), Exception),
    "UnitError": (
        errors.UnitError("455 mhz", "a frequency in Hz, kHz, MHz or GHz", " (did you mean 'MHz'?)"),
        ValueError,
    ),
    "LineupError": (
        errors.LineupError(
            "'12 dB': expected a power in dBm", file="a.toml", stage="stage 2 'pa'", field="p1db"
        ),
        ValueError,
    ),
    "OutOfDataRange": (
        errors.OutOfDataRange(
            stage="lpf",
            freq_hz=1.5e9,
            data_start_hz=1e6,
            data_stop_hz=1e9,
            product="3f1",
            hint="extend the data",
            file="a.toml",
            data_file="lpf.s2p",
        ),
        ValueError,
    ),
    "SweepError": (errors.SweepError("--step 0 dB: expected a step > 0"), ValueError),
    "YieldError": (errors.YieldError("--samples 0: expected a whole number from 1 to 100000"), ValueError),
    "TouchstoneFault": (errors.TouchstoneFault("line 4: expected 9 values"), ValueError),
    "OutputError": (errors.OutputError("'out/': names a folder, not a file"), OSError),
    "ResourceError": (errors.ResourceError("spurplan's bands/ folder is missing"), FileNotFoundError),
}


def _error_classes() -> set[str]:
    return {
        name
        for name, obj in vars(errors).items()
        if inspect.isclass(obj) and issubclass(obj, BaseException) and obj.__module__ == errors.__name__
    }


def _fields(exc: BaseException):
    if dataclasses.is_dataclass(exc):
        return {f.name: getattr(exc, f.name) for f in dataclasses.fields(exc)}
    return exc.args


def test_every_error_class_has_a_case():
    # A class added to errors.py without a case here fails (so it is pickled and mapped too).
    assert _error_classes() == set(CASES)


@pytest.mark.parametrize("name", sorted(CASES))
def test_error_round_trips_through_pickle(name):
    exc, _ = CASES[name]
    for protocol in range(pickle.HIGHEST_PROTOCOL + 1):
        back = pickle.loads(pickle.dumps(exc, protocol=protocol))
        assert type(back) is type(exc)
        assert str(back) == str(exc)
        assert _fields(back) == _fields(exc)


def test_keyword_built_dataclass_error_pickles():
    # The failure the issue names: OutOfDataRange built with keywords had empty args, so
    # unpickling called OutOfDataRange() without its fields (pickle docs, __reduce__).
    exc = errors.OutOfDataRange(stage="f", freq_hz=2e9, data_start_hz=1e6, data_stop_hz=1e9)
    assert exc.args == ()  # BaseException.__new__ saw no positional arguments
    back = pickle.loads(pickle.dumps(exc))
    assert (back.stage, back.freq_hz, back.data_stop_hz) == ("f", 2e9, 1e9)


@pytest.mark.parametrize("name", sorted(CASES))
def test_error_is_its_builtin_and_a_spurplan_error(name):
    exc, builtin = CASES[name]
    assert isinstance(exc, builtin)
    assert isinstance(exc, errors.SpurplanError)
    with pytest.raises(builtin):
        raise exc


def test_no_exception_class_lives_outside_errors_py():
    # Every module imported, every class defined in it looked at.  cli._Interrupted is a
    # control-flow signal inside the CLI (Ctrl-C passed through click), not an error.
    allowed = {("spurplan.cli", "_Interrupted")}
    found = set()
    for info in pkgutil.walk_packages(spurplan.__path__, "spurplan."):
        module = importlib.import_module(info.name)
        for name, obj in vars(module).items():
            if inspect.isclass(obj) and issubclass(obj, BaseException) and obj.__module__ == info.name:
                found.add((info.name, name))
    assert found - {("spurplan.errors", n) for n in CASES} == allowed


@pytest.mark.parametrize(
    "module, name",
    [
        ("spurplan.analyses.sweep", "SweepError"),
        ("spurplan.output.files", "OutputError"),
        ("spurplan.analyses.montecarlo", "YieldError"),
        ("spurplan.io.touchstone", "TouchstoneFault"),
    ],
)
def test_old_import_paths_still_work(module, name):
    assert getattr(importlib.import_module(module), name) is getattr(errors, name)


@pytest.mark.parametrize("name", sorted(CASES))
def test_cli_maps_each_error_to_one_line_and_exit_2(name, monkeypatch, tmp_path):
    # Whatever raises it, the CLI prints "spurplan: error: <str(exc)>" on one line and exits
    # 2 (README, "Bad input gives one line ..."); the loader is replaced by one that raises.
    exc, _ = CASES[name]

    def raising(path, mode=None):
        raise exc

    # The command line loads every file through its modes (spurplan.io.modes).
    monkeypatch.setattr("spurplan.io.modes.load_modes", raising)
    code, out, err, detail, _ = run_in_process(["check", str(tmp_path / "any.toml")])
    line = assert_one_error_line(code, out, err, detail=detail)
    assert line == "spurplan: error: " + " ".join(str(exc).split())


def test_cli_error_with_a_line_break_stays_one_line(monkeypatch, tmp_path):
    def raising(path, mode=None):
        raise errors.SweepError("first\nsecond")

    monkeypatch.setattr("spurplan.io.modes.load_modes", raising)
    code, out, err, detail, _ = run_in_process(["check", str(tmp_path / "any.toml")])
    assert assert_one_error_line(code, out, err, detail=detail) == "spurplan: error: first second"


def test_missing_data_folder_is_a_resource_error(monkeypatch, tmp_path):
    # Nothing at either place resources.data_dir looks: an incomplete installation.
    import spurplan.io.resources as resources

    monkeypatch.setattr(resources, "_PACKAGE", tmp_path / "spurplan")
    with pytest.raises(errors.ResourceError, match="bands/ folder is missing"):
        resources.data_dir("bands")


# --- Library messages name parameters; the command line shows its options -------------


def test_library_error_names_the_parameter_and_the_cli_its_option(tmp_path):
    # Rule of this package (DEVELOPERS.md, "Errors"): the library says "step", the
    # command line "--step"; the value and expectation are the same words in both.
    from spurplan.io.channels import sweep_points

    with pytest.raises(errors.SweepError) as caught:
        sweep_points(0.0, 1.0, 0.0, "drive", "dB")
    assert str(caught.value).startswith("step 0 dB: expected a step > 0")
    assert "--" not in str(caught.value)
    assert caught.value.shown({"step": "--step"}).startswith("--step 0 dB: expected a step > 0")
    again = pickle.loads(pickle.dumps(caught.value))  # errors come back from Dask workers
    assert again.shown({"step": "--step"}) == caught.value.shown({"step": "--step"})
    code, _, stderr, _, _ = run_in_process(
        ["drive", "--start", "-10 dBm", "--stop", "0 dBm", "--step", "0 dB"]
    )
    assert code == 2
    assert "--step 0 dB: expected a step > 0" in stderr


def test_no_library_module_spells_a_command_line_option():
    # Every option of every command, as click declares it; no module but the CLI and the
    # text it prints (output/terminal.py, which may point at an option: "check with
    # --strict") may write one in a message (docstrings, which document the CLI, are not
    # messages).
    import ast

    from spurplan.cli import main

    spelled = {
        o
        for c in main.commands.values()
        for p in c.params
        for o in getattr(p, "opts", ())
        if o.startswith("-")
    }
    package = Path(spurplan.__file__).parent
    found = []
    for path in package.rglob("*.py"):
        if path.name == "cli.py" or path.relative_to(package).as_posix() == "output/terminal.py":
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        docstrings = {
            id(node.body[0].value)
            for node in ast.walk(tree)
            if isinstance(node, (ast.Module, ast.ClassDef, ast.FunctionDef, ast.AsyncFunctionDef))
            and node.body
            and isinstance(node.body[0], ast.Expr)
            and isinstance(node.body[0].value, ast.Constant)
        }
        for node in ast.walk(tree):
            if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in docstrings:
                words = set(re.findall(r"(?<![\w-])--?[a-z][\w-]*", node.value))
                found += [f"{path.name}:{node.lineno}: {w}" for w in words & spelled]
    assert found == []
