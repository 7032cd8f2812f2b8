"""The public API of the package: names resolve lazily and stay the documented callables."""

from __future__ import annotations

import importlib
import importlib.util
import subprocess
import sys

import comparo


def test_every_public_name_resolves():
    for name in comparo.__all__:
        assert getattr(comparo, name) is not None, name


def test_no_module_shares_a_public_function_name():
    """``comparo.fit(...)`` as README.md and docs/notebook.md write it: no module of the API layer
    is named like a public function, so importing every module cannot turn a function into a module.
    (comparo.cli.commands holds one module per CLI verb, reached only by its full name.)"""
    import pkgutil

    names = {
        m.name.rsplit(".", 1)[-1]
        for m in pkgutil.walk_packages(comparo.__path__, "comparo.")
        if not m.name.startswith("comparo.cli.commands.")
    }
    functions = {
        n
        for n in comparo.__all__
        if callable(getattr(comparo, n)) and not isinstance(getattr(comparo, n), type)
    }
    assert {"fit", "derive", "assess_sensitivity", "sensitivity"} <= functions
    assert not functions & names, functions & names
    for name in ("fit", "derive", "sensitivity", "assess_sensitivity"):
        assert importlib.util.find_spec(f"comparo.{name}") is None, name


def test_fresh_interpreter_submodule_first():
    """In a new process, importing the defining packages first still leaves the functions on the
    package."""
    code = (
        "import comparo.report, comparo.fitting, comparo.derivation, "
        "comparo.fitting.source_sensitivity\n"
        "import comparo, types\n"
        "bad = [n for n in ('fit', 'derive', 'sensitivity') if isinstance(getattr(comparo, n), "
        "types.ModuleType)]\n"
        "assert not bad, bad\n"
        "assert comparo.fit is comparo.fitting.fit and comparo.derive is "
        "comparo.derivation.derive\n"
        "assert comparo.assess_sensitivity is comparo.fitting.source_sensitivity.sensitivity\n"
    )
    subprocess.run([sys.executable, "-c", code], check=True)


def test_fit_lives_in_the_lines_package():
    """``comparo.fit`` is the function of :mod:`comparo.fitting`; no module shares its name."""
    import comparo.fitting

    assert comparo.fit is comparo.fitting.fit
    assert comparo.FitResult is comparo.fitting.FitResult
    assert importlib.util.find_spec("comparo.fit") is None
