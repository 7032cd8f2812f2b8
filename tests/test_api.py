"""The public API of the package: names resolve lazily and stay the documented callables."""

from __future__ import annotations

import importlib
import importlib.util
import subprocess
import sys
import types

import comparo


def test_every_public_name_resolves():
    for name in comparo.__all__:
        assert getattr(comparo, name) is not None, name


def test_function_names_survive_submodule_imports():
    """``comparo.fit(...)`` as DESIGN.md writes it, even after ``comparo.fit`` the module is imported."""
    for name in ("sensitivity",):
        module = importlib.import_module(f"comparo.{name}")
        assert isinstance(module, types.ModuleType)
        public = getattr(comparo, name)
        assert callable(public) and not isinstance(public, types.ModuleType), name
        assert public is getattr(module, name)


def test_fresh_interpreter_submodule_first():
    """In a new process, importing the submodule first still leaves the function on the package."""
    code = (
        "import comparo.report, comparo.lines, comparo.derivation, comparo.sensitivity\n"
        "import comparo, types\n"
        "bad = [n for n in ('fit', 'derive', 'sensitivity') if isinstance(getattr(comparo, n), types.ModuleType)]\n"
        "assert not bad, bad\n"
    )
    subprocess.run([sys.executable, "-c", code], check=True)


def test_fit_lives_in_the_lines_package():
    """``comparo.fit`` is the function of :mod:`comparo.lines`; no module shares its name."""
    import comparo.lines

    assert comparo.fit is comparo.lines.fit
    assert comparo.FitResult is comparo.lines.FitResult
    assert importlib.util.find_spec("comparo.fit") is None
