"""The Examples sections of every module in ``screen/`` run as part of the default suite.

One test per module, so a failing example names its module; the same examples run with
``python -m pytest --doctest-modules screen/<module>.py``.
"""

from __future__ import annotations

import doctest
import importlib
import io
import pkgutil

import pytest

import screen


def _modules() -> list[str]:
    return sorted(info.name for info in pkgutil.walk_packages(screen.__path__, "screen.")
                  if not info.name.startswith("screen.workflow"))


@pytest.mark.parametrize("name", _modules())
def test_module_examples_run(name, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # examples that write files never write into the repository
    module = importlib.import_module(name)
    finder = doctest.DocTestFinder(exclude_empty=True)
    runner = doctest.DocTestRunner()
    out = io.StringIO()
    for test in finder.find(module, name, globs=dict(vars(module))):
        runner.run(test, out=out.write)
    result = runner.summarize(verbose=False)
    assert result.failed == 0, out.getvalue()
