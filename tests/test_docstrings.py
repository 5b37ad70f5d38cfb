"""Every example in a docstring of zline runs and prints what it says (floats compared with FLOAT_CMP)."""

import doctest
import importlib
import pkgutil

import pytest
from pytest_doctestplus.output_checker import OutputChecker

import zline
import zline.physics
import zline.widgets


def _module_names():
    names = []
    for pkg in (zline, zline.physics, zline.widgets):
        names.append(pkg.__name__)
        for info in pkgutil.walk_packages(pkg.__path__, pkg.__name__ + "."):
            if not info.name.endswith("__main__"):
                names.append(info.name)
    return sorted(set(names))


_EXAMPLES = []
for _name in _module_names():
    _mod = importlib.import_module(_name)
    for _test in doctest.DocTestFinder(exclude_empty=True).find(_mod, _name):
        if _test.examples and _test.name.startswith(_name):
            _EXAMPLES.append(_test)


def test_examples_were_found():
    # the physics modules document their public functions with examples (STYLE.md habit 9)
    assert len(_EXAMPLES) >= 3


@pytest.mark.parametrize("example", _EXAMPLES, ids=[t.name for t in _EXAMPLES])
def test_docstring_example(example):
    runner = doctest.DocTestRunner(checker=OutputChecker(),
                                   optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    result = runner.run(example, out=lambda s: _OUT.append(s))
    assert result.failed == 0, "".join(_OUT)


_OUT = []
