"""The examples in the docstrings of eddyvigil's modules run and print what they say.

pytest's ``--doctest-modules`` collects files by path, and the folders ``stats/``, ``monitor/``
and ``simulator/`` would then import a second time under the top-level names ``stats``,
``monitor`` and ``simulator`` (the package installs them as ``eddyvigil.*`` through a
package-dir mapping). So the modules are found by walking the installed packages, imported by
their ``eddyvigil.*`` names, and their examples run with the standard library's doctest; one
test per module that has examples, inside the one ``python -m pytest`` run.
"""

from __future__ import annotations

import doctest
import importlib
import importlib.util
import io
import pkgutil
from pathlib import Path

import pytest

PACKAGES = ("eddyvigil.stats", "eddyvigil.monitor", "eddyvigil.simulator")


def _modules_with_examples() -> list[str]:
    names = []
    for package in PACKAGES:
        spec = importlib.util.find_spec(package)
        for info in pkgutil.walk_packages(spec.submodule_search_locations, package + "."):
            origin = importlib.util.find_spec(info.name).origin
            if origin and origin.endswith(".py") and ">>>" in Path(origin).read_text("utf-8"):
                names.append(info.name)
    return sorted(names)


MODULES = _modules_with_examples()


def test_examples_were_found():
    # the accumulators' examples at least (a broken walk would silently test nothing)
    for name in ("eddyvigil.stats.moments", "eddyvigil.stats.blocking", "eddyvigil.stats.names"):
        assert name in MODULES


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(name)
    tests = doctest.DocTestFinder().find(module, name)
    flags = doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE
    runner = doctest.DocTestRunner(optionflags=flags)
    out = io.StringIO()
    for test in tests:
        runner.run(test, out=out.write)
    assert runner.tries > 0, f"{name}: no example ran"
    assert runner.failures == 0, out.getvalue()
