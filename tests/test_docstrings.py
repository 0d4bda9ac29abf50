"""Every example in a docstring of the package runs and prints what it says (common practice: doctest)."""

import doctest
import importlib
import pkgutil
from pathlib import Path

import pytest

import netprobe


def _modules_with_examples():
    names = []
    for info in pkgutil.walk_packages(netprobe.__path__, "netprobe."):
        if info.name.endswith("__main__"):  # running it would start the command line
            continue
        spec = importlib.util.find_spec(info.name)
        if spec.origin and ">>> " in Path(spec.origin).read_text(encoding="utf-8"):
            names.append(info.name)
    return names


MODULES = _modules_with_examples()


def test_the_package_has_docstring_examples():
    assert len(MODULES) >= 5, MODULES


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE, verbose=False)
    assert result.attempted > 0
    assert result.failed == 0, f"{result.failed} of {result.attempted} docstring examples of {name} failed (see above)"
