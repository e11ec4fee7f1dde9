"""The package's imports, drawn from its source, follow the layers of the design (DESIGN.md, "Layout").

Layers only look down: canon and the dedupe maths at the bottom, then storage, then the shared layers,
then stages and analysis, then jobs, then the CLI and the API. A stage imports no other stage. The graph
is read with :mod:`ast` from every module of the package (imports inside functions included: a lazy
import is a dependency too), so it holds whatever runs.

A new package or top-level module must be placed in :data:`LAYERS`; the test fails until it is, saying so.
"""

from __future__ import annotations

import ast
from collections.abc import Iterator
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "service" / "linkfold"

# Unit -> (layer, kind). A unit is a top-level module or package of linkfold, except that the dedupe
# package is two units: its pure maths (``dedupe``) and the database stage around it (``dedupe.stage``).
# An import from layer A to layer B is allowed when B <= A; kind "stage" units must not import each other.
BASE, CORE, STORE, SHARED, STAGES, JOBS, INTERFACE = range(7)
LAYERS: dict[str, tuple[int, str]] = {
    # What everything may use: the error hierarchy, the settings table, progress reporting, the JSON and
    # table helpers, and the package's face (its version; its pipeline names are lazy, by string).
    "": (BASE, "base"),
    "errors": (BASE, "base"),
    "settings": (BASE, "base"),
    "progress": (BASE, "base"),
    "_json": (BASE, "base"),
    "_tabular": (BASE, "base"),
    # The pure core: no database, no network.
    "canon": (CORE, "core"),
    "dedupe": (CORE, "core"),
    "pseudonyms": (CORE, "core"),
    # Storage, and the Alembic environment and versions that own its schema (shipped in the package).
    "store": (STORE, "store"),
    "migrations": (STORE, "store"),
    # Shared layers, below the stages: talking HTTP safely; reading input files and the executor slot in here.
    "web": (SHARED, "shared"),
    "executor": (SHARED, "shared"),
    "inputs": (SHARED, "shared"),
    # Stages: each reads what is pending and writes its result; none imports another.
    "ingest": (STAGES, "stage"),
    "follow": (STAGES, "stage"),
    "content": (STAGES, "stage"),
    "dedupe.stage": (STAGES, "stage"),
    # Analysis over stored evidence.
    "outlets": (STAGES, "analysis"),
    "exposure": (STAGES, "analysis"),
    "network": (STAGES, "analysis"),
    "corpus": (STAGES, "analysis"),
    "compare": (STAGES, "analysis"),
    "suggest": (STAGES, "analysis"),
    # Orchestration.
    "jobs": (JOBS, "jobs"),
    # The interfaces: the command, its modules, the HTTP API and pages, the demo, the Python client.
    "cli": (INTERFACE, "interface"),
    "_commands": (INTERFACE, "interface"),
    "api": (INTERFACE, "interface"),
    "demo": (INTERFACE, "interface"),
    "demo_data": (INTERFACE, "interface"),  # the demo's invented files and the script that makes them
    "client": (INTERFACE, "interface"),
}

# Known, being fixed by issue 17 (each in another engineer's branch); the lead removes a line when the
# branch that fixes it lands. (importing unit, imported unit): why it is still here.
KNOWN: dict[tuple[str, str], str] = {}


def _module_name(path: Path) -> str:
    rel = path.relative_to(PACKAGE).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(["linkfold", *parts])


def _is_package(path: Path) -> bool:
    return path.name == "__init__.py"


def _exists(module: str) -> bool:
    rel = Path(*module.split(".")[1:]) if "." in module else Path()
    return (PACKAGE / rel).with_suffix(".py").is_file() or (PACKAGE / rel / "__init__.py").is_file()


def _resolve(module: str) -> str:
    """The longest prefix of ``module`` that is a module of ours (``from .. import __version__`` names
    the package, not a module)."""
    parts = module.split(".")
    while len(parts) > 1 and not _exists(".".join(parts)):
        parts.pop()
    return ".".join(parts)


def imports_of(path: Path, module: str | None = None) -> Iterator[tuple[str, int]]:
    """(module of ours, line) for every import in ``path`` (the module ``module``, by default the one
    the path is in the package)."""
    here = module or _module_name(path)
    package = here if _is_package(path) else here.rsplit(".", 1)[0]
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), str(path))):
        if isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name == "linkfold" or alias.name.startswith("linkfold."):
                    yield _resolve(alias.name), node.lineno
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            elif node.module and (node.module == "linkfold" or node.module.startswith("linkfold.")):
                target = node.module
            else:
                continue
            for alias in node.names:
                yield _resolve(f"{target}.{alias.name}"), node.lineno


def unit_of(module: str) -> str:
    parts = module.split(".")[1:]
    if parts[:2] == ["dedupe", "stage"]:
        return "dedupe.stage"
    return parts[0] if parts else ""


def _edges() -> list[tuple[str, str, str, int]]:
    out = []
    for path in sorted(PACKAGE.rglob("*.py")):
        source = unit_of(_module_name(path))
        for target, line in imports_of(path):
            out.append((source, unit_of(target), f"{path.relative_to(PACKAGE.parent)}:{line}", line))
    return out


def test_every_unit_is_placed_in_a_layer():
    units = {unit_of(_module_name(p)) for p in PACKAGE.rglob("*.py")}
    missing = sorted(units - set(LAYERS))
    assert not missing, (f"{missing}: not in tests/test_layers.py LAYERS; add each with its layer (see "
                         "DESIGN.md, Layout) and kind, so the import check knows where it belongs")


def judge(source: str, target: str) -> str | None:
    """Why an import from unit ``source`` to unit ``target`` breaks the layers, or None."""
    if source == target:
        return None
    (s_layer, s_kind), (t_layer, t_kind) = LAYERS[source], LAYERS[target]
    if t_layer > s_layer:
        return f"{source or 'linkfold'} (layer {s_layer}) imports {target} (layer {t_layer}), which is above it"
    if s_kind == "stage" and t_kind == "stage":
        return f"the stage {source} imports the stage {target}; move what both need below the stages"
    return None


def violations() -> list[str]:
    found = []
    for source, target, where, _line in _edges():
        if source in LAYERS and target in LAYERS and (source, target) not in KNOWN:
            why = judge(source, target)
            if why:
                found.append(f"{where}: {why}")
    return found


@pytest.mark.parametrize(("source", "target", "broken"), [
    ("store", "ingest", True),          # storage looking up at a stage
    ("canon", "store", True),           # the pure core reaching for the database
    ("dedupe", "dedupe.stage", True),   # the maths reaching for its stage
    ("content", "follow", True),        # a stage importing a stage
    ("jobs", "_commands", True),        # orchestration reaching for the CLI
    ("exposure", "outlets", False),     # analysis over analysis
    ("jobs", "dedupe.stage", False),
    ("api", "store", False),
    ("ingest", "", False),              # the package's face (its version)
])
def test_the_rules(source, target, broken):
    assert (judge(source, target) is not None) is broken


def test_imports_only_look_down():
    found = violations()
    assert not found, "imports against the layers:\n" + "\n".join(found)


def test_the_known_exceptions_still_exist():
    # An exception that no longer occurs must leave the list, so the list never hides a new edge.
    edges = {(s, t) for s, t, _w, _l in _edges()}
    gone = sorted(k for k in KNOWN if k not in edges)
    assert not gone, f"no longer imported, remove from KNOWN: {gone}"


@pytest.mark.parametrize(("source", "module", "expected"), [
    # The reader itself, on hand-made modules: relative, lazy and absolute imports, a name of the package.
    ("from ..store import tables as t\n", "linkfold.content.fetching", "linkfold.store.tables"),
    ("from ..store.runs import recording_run\n", "linkfold.ingest.load", "linkfold.store.runs"),
    ("def f():\n    from ..web.redirects import follow_chain\n", "linkfold.content.fetching", "linkfold.web.redirects"),
    ("from .. import __version__\n", "linkfold.api.routes", "linkfold"),
    ("import linkfold.store.runs\n", "linkfold.jobs.nightly", "linkfold.store.runs"),
    ("from . import pending as pq\n", "linkfold.store.runs", "linkfold.store.pending"),
])
def test_the_reader_resolves_imports(tmp_path, source, module, expected):
    fake = tmp_path / "m.py"
    fake.write_text(source, encoding="utf-8")
    assert expected in [m for m, _ in imports_of(fake, module)]
    assert unit_of(expected) in LAYERS


def test_the_dedupe_stage_holds_no_sql():
    # Issue 17: its reads and writes live in store/ (candidates, signatures, decisions, linkgraph, …); the
    # stage keeps the steps. SQLAlchemy types for a connection or an engine are all it may name.
    for path in sorted((PACKAGE / "dedupe" / "stage").glob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                assert not any(a.name == "sqlalchemy" for a in node.names), path.name
            elif isinstance(node, ast.ImportFrom) and node.module:
                assert node.module in ("sqlalchemy.engine",) or not node.module.startswith("sqlalchemy"), path.name
                assert not node.module.endswith("store.tables") and not (
                    node.module.endswith("store") and any(a.name == "tables" for a in node.names)), path.name
