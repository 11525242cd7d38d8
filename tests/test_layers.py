"""The package's layers: a plain system description at the bottom, imports
that run one way, and one place for the names of result columns."""

from __future__ import annotations

import ast
import pickle
import subprocess
import sys
from importlib import resources
from pathlib import Path

import eqbatch
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from eqbatch import columns
from eqbatch.definition import define
from eqbatch.demo import reformer_system
from eqbatch.spec import SystemSpec
from eqbatch.system_file import read_spec

PACKAGE = Path(eqbatch.__file__).parent


def _imports_of(tree: ast.Module) -> set[str]:
    """The package modules a module imports when it is loaded (module level,
    including ``if`` blocks such as ``TYPE_CHECKING``)."""
    found = set()
    body = list(tree.body)
    while body:
        node = body.pop()
        if isinstance(node, ast.If):
            body += node.body + node.orelse
        elif isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("eqbatch"):
            if node.module == "eqbatch":
                found |= {alias.name for alias in node.names}
            else:
                found.add(node.module.split(".")[1])
    return found


def test_package_imports_form_no_cycle() -> None:
    graph = {}
    for path in PACKAGE.glob("*.py"):
        if path.stem != "__init__":
            graph[path.stem] = _imports_of(ast.parse(path.read_text())) - {path.stem, "_core"}
    done: set[str] = set()

    def visit(name: str, path: list[str]) -> None:
        for dep in sorted(graph.get(name, ())):
            assert dep not in path, f"import cycle: {' -> '.join(path[path.index(dep) :] + [dep])}"
            if dep not in done:
                visit(dep, path + [dep])
        done.add(name)

    for name in sorted(graph):
        visit(name, [name])
    assert graph["spec"] <= {"errors", "kdata", "speciesdata"}  # the description sits at the bottom


def test_no_function_level_imports_of_package_modules() -> None:
    # Optional third-party packages load where they are used; package modules
    # load at module level (a function-level import would hide a cycle).
    found = []
    for path in PACKAGE.glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if not isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                continue
            for inner in ast.walk(node):
                if isinstance(inner, ast.ImportFrom):
                    names = [inner.module or ""]
                elif isinstance(inner, ast.Import):
                    names = [alias.name for alias in inner.names]
                else:
                    continue
                found += [f"{path.name}: {node.name} imports {n}" for n in names if n.startswith("eqbatch")]
    assert not found


def test_import_loads_no_table_plotting_or_cluster_package() -> None:
    code = (
        "import sys, eqbatch; "
        "print(sorted(m for m in ('pandas', 'pyarrow', 'matplotlib', 'scipy', 'distributed', 'chemicals') "
        "if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_every_public_name_resolves_and_thermo_is_reachable() -> None:
    for name in eqbatch.__all__:
        assert getattr(eqbatch, name) is not None
        assert name in dir(eqbatch)
    assert eqbatch.thermo.equilibrium_temperature is not None
    assert eqbatch.sweep is eqbatch.sweeps.sweep
    with pytest.raises(AttributeError, match="no_such_name"):
        eqbatch.no_such_name  # noqa: B018


def test_a_system_is_its_description_and_a_file_reads_into_one() -> None:
    with resources.as_file(resources.files("eqbatch") / "data/reformer.toml") as path:
        spec = read_spec(path)
        from_file = eqbatch.ReactionSystem.from_toml(path)
    assert type(spec) is SystemSpec
    assert isinstance(from_file, SystemSpec)
    system = eqbatch.ReactionSystem.from_spec(spec)
    assert system.arguments() == from_file.arguments() == spec.arguments()
    feed = [1.0, 3.0, 0.0, 0.0, 0.0, 0.02]
    a = system.solve(feed, T=[900.0, 1100.0], P=10.0)
    b = from_file.solve(feed, T=[900.0, 1100.0], P=10.0)
    assert np.array_equal(a.amounts, b.amounts)


def test_a_description_is_immutable_and_survives_pickling() -> None:
    spec = define(["CO", "H2O", "CO2", "H2"], {"shift": "CO + H2O = CO2 + H2"}, lnK=[0.3])
    with pytest.raises(ValueError, match="read-only"):
        spec.stoich[0, 0] = 2.0
    with pytest.raises(AttributeError):
        spec.P0 = 2.0  # type: ignore[misc]
    again = pickle.loads(pickle.dumps(spec))
    assert again.arguments() == spec.arguments()
    assert not again.stoich.flags.writeable
    # CO + H2O = CO2 + H2 from 1 + 1 mol: x / (1 - x) = sqrt(K) (closed form)
    x = np.exp(0.15) / (1 + np.exp(0.15))
    amounts = eqbatch.ReactionSystem.from_spec(again).solve([1.0, 1.0, 0.0, 0.0]).amounts
    assert np.allclose(amounts, [[1 - x, 1 - x, x, x]], rtol=1e-12)


def test_result_tables_and_sweeps_name_their_columns_alike(tmp_path: Path) -> None:
    system = reformer_system()
    res = system.solve([0.98, 2.94, 0.0, 0.0, 0.0, 0.02], T=[900.0, 1000.0], P=5.0)
    expected = (
        columns.input_names(system, temperature=True)
        + columns.output_names(system)
        + columns.dry_names(system)
        + columns.syngas_names(system)
    )
    assert list(res.columns()) == expected
    assert list(res.to_pandas().columns) == expected
    cases = {name: res.columns()[name] for name in columns.input_names(system, temperature=True)}
    pq.write_table(pa.table(cases), tmp_path / "cases.parquet")
    eqbatch.sweep(system, tmp_path / "cases.parquet", tmp_path / "out.parquet", quiet=True)
    table = pq.read_table(tmp_path / "out.parquet")
    # every species has a feed column, so every reacting one gets a conversion column
    assert table.column_names == (
        list(cases)
        + columns.output_names(system, system.reacting_species())
        + columns.dry_names(system)
        + columns.syngas_names(system)
    )
    for name in columns.output_names(system) + columns.dry_names(system) + columns.syngas_names(system):
        if name == columns.STATUS_NAME:  # dictionary-encoded names of the codes
            names = [eqbatch.Status(code).name for code in res.status]
            assert table.column(name).to_pylist() == names
            assert res.to_pandas()[name].tolist() == names
            continue
        assert np.array_equal(table.column(name).to_numpy(), np.asarray(res.columns()[name]), equal_nan=True)
