"""The examples in the README and in the docstrings run and say what they show."""

from __future__ import annotations

import doctest
import importlib
import re
from pathlib import Path

import pytest

README = Path(__file__).resolve().parents[1] / "README.md"
MODULES = [
    "eqbatch",
    "eqbatch.errors",
    "eqbatch.status",
    "eqbatch.equations",
    "eqbatch.kdata",
    "eqbatch.speciesdata",
    "eqbatch.compounds",
    "eqbatch.spec",
    "eqbatch.definition",
    "eqbatch.system_file",
    "eqbatch.columns",
    "eqbatch.outputs",
    "eqbatch.result",
    "eqbatch.approach",
    "eqbatch.system",
    "eqbatch.prepared",
    "eqbatch.thermo",
    "eqbatch.uncertainty",
    "eqbatch.boundary",
    "eqbatch.sweeps",
    "eqbatch.hazards",
    "eqbatch.realgas",
    "eqbatch.units",
    "eqbatch.grid",
    "eqbatch.where",
]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name: str) -> None:
    module = importlib.import_module(name)
    failed, attempted = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert attempted > 0 and failed == 0


def test_readme_python_blocks_run() -> None:
    blocks = re.findall(r"```python\n(.*?)```", README.read_text(), flags=re.S)
    assert blocks
    namespace: dict = {}  # blocks build on each other, as a reader runs them
    for block in blocks:
        namespace.pop("res", None)
        exec(compile(block, str(README), "exec"), namespace)
        if "res" in namespace:  # blocks that solve something show a converged result
            assert namespace["res"].converged.all()
