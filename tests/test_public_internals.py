"""Library first: the CLI (``_commands/``) and the HTTP API (``api/``) are shells over public, documented
functions. Every name they import from the rest of the package, and every attribute they read from a
module of it, must be public (no leading underscore) and documented.

What "public" means here (DEVELOPERS.md, "Public face"):
- no part of the import path starts with an underscore, except the package's shared internals at its top,
  ``linkfold._json`` and ``linkfold._tabular`` (documented in DEVELOPERS.md; what they offer is public
  and documented like the rest), and ``_commands`` itself;
- the name itself has no leading underscore (``__version__`` aside).
What "documented" means: a module, function or class has a docstring of its own (not one inherited, nor
the signature a dataclass writes in when there is none); a constant has a ``#:`` comment above its
assignment or a string right after it (the convention Sphinx reads); a table is documented by
``store/tables.py`` and the migrations.
"""

from __future__ import annotations

import ast
import importlib
import inspect
import types
from dataclasses import dataclass
from pathlib import Path

import pytest
import sqlalchemy as sa

PACKAGE = Path(__file__).resolve().parents[1] / "service" / "linkfold"
SHELLS = ("_commands", "api")
SHARED_INTERNALS = {"_json", "_tabular"}


@dataclass(frozen=True)
class Use:
    file: str
    line: int
    module: str  # the absolute module the name is read from
    name: str

    def __str__(self) -> str:
        return f"{self.file}:{self.line}: {self.module}.{self.name}"


def _absolute(module_file: Path, level: int, module: str | None) -> str:
    parts = ["linkfold", *module_file.relative_to(PACKAGE).with_suffix("").parts]
    if parts[-1] == "__init__":
        parts.pop()
    else:
        parts.pop()  # a module's own package
    if level > 1:
        parts = parts[: len(parts) - (level - 1)]
    return ".".join([*parts, *([module] if module else [])])


def _uses(shell: str) -> list[Use]:
    """Every name a shell package imports from the rest of linkfold, and every attribute it reads from a
    module of linkfold it bound to a name."""
    uses: list[Use] = []
    for path in sorted((PACKAGE / shell).glob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for parent in ast.walk(tree):
            for child in ast.iter_child_nodes(parent):
                child.parent = parent  # type: ignore[attr-defined]
        rel = str(path.relative_to(PACKAGE))
        modules: dict[str, str] = {}  # local name -> the linkfold module it is bound to
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom):
                if node.level:
                    source = _absolute(path, node.level, node.module)
                elif (node.module or "").split(".")[0] == "linkfold":
                    source = node.module or ""
                else:
                    continue
                if source == f"linkfold.{shell}" or source.startswith(f"linkfold.{shell}."):
                    continue  # within the shell itself
                for alias in node.names:
                    uses.append(Use(rel, node.lineno, source, alias.name))
                    if isinstance(_resolve(source, alias.name), types.ModuleType):
                        modules[alias.asname or alias.name] = f"{source}.{alias.name}"
            elif isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name.split(".")[0] == "linkfold" and alias.asname:
                        modules[alias.asname] = alias.name
        for node in ast.walk(tree):
            if (isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name)
                    and node.value.id in modules):
                uses.extend(_chain(rel, node, modules[node.value.id]))
    return uses


def _chain(rel: str, node: ast.Attribute, module: str) -> list[Use]:
    """``store.tokens.Scope``: each step from a module, as long as the step before was a module."""
    found = [Use(rel, node.lineno, module, node.attr)]
    parent = getattr(node, "parent", None)
    if isinstance(_resolve(module, node.attr), types.ModuleType) and isinstance(parent, ast.Attribute):
        found.extend(_chain(rel, parent, f"{module}.{node.attr}"))
    return found


def _resolve(module: str, name: str) -> object:
    mod = importlib.import_module(module)
    if hasattr(mod, name):
        return getattr(mod, name)
    return importlib.import_module(f"{module}.{name}")


def _private_parts(use: Use) -> list[str]:
    parts = use.module.split(".")[1:]
    bad = [p for p in parts if p.startswith("_") and p not in SHARED_INTERNALS | {"_commands"}]
    if use.name.startswith("_") and use.name != "__version__":
        bad.append(use.name)
    return bad


def _own_doc(obj: object) -> str | None:
    if isinstance(obj, types.ModuleType):
        return obj.__doc__
    if inspect.isclass(obj):
        doc = obj.__dict__.get("__doc__")
        # A dataclass without a docstring gets its signature written in: that documents nothing.
        if doc and doc.startswith(f"{obj.__name__}("):
            return None
        return doc
    if callable(obj):
        return getattr(inspect.unwrap(obj), "__doc__", None)  # type: ignore[arg-type]
    return None


def _constant_documented(module: str, name: str, seen: frozenset[str] = frozenset()) -> bool:
    """A ``#:`` comment above the assignment, or a string statement right after it, in the module that
    assigns it (followed through re-exports)."""
    if module in seen:
        return False
    mod = importlib.import_module(module)
    source_file = getattr(mod, "__file__", None)
    if source_file is None:
        return False
    text = Path(source_file).read_text(encoding="utf-8")
    lines = text.splitlines()
    tree = ast.parse(text)
    for i, node in enumerate(tree.body):
        targets: list[ast.expr] = []
        if isinstance(node, ast.Assign):
            targets = node.targets
        elif isinstance(node, ast.AnnAssign):
            targets = [node.target]
        if any(isinstance(t, ast.Name) and t.id == name for t in targets):
            above = lines[node.lineno - 2].strip() if node.lineno > 1 else ""
            after = tree.body[i + 1] if i + 1 < len(tree.body) else None
            return above.startswith("#:") or (
                isinstance(after, ast.Expr) and isinstance(after.value, ast.Constant)
                and isinstance(after.value.value, str))
        if isinstance(node, ast.ImportFrom) and any((a.asname or a.name) == name for a in node.names):
            original = next(a.name for a in node.names if (a.asname or a.name) == name)
            package = module if source_file.endswith("__init__.py") else module.rsplit(".", 1)[0]
            base = package.split(".")
            if node.level > 1:
                base = base[: len(base) - (node.level - 1)]
            source = ".".join([*base, *([node.module] if node.module else [])]) if node.level else node.module
            return _constant_documented(source or "", original, seen | {module})
    return False


def _documented(use: Use) -> bool:
    obj = _resolve(use.module, use.name)
    if isinstance(obj, sa.Table):
        return True  # documented by store/tables.py and the migrations
    if isinstance(obj, types.ModuleType) or inspect.isclass(obj) or inspect.isroutine(obj):
        doc = _own_doc(obj)
        return bool(doc and doc.strip())
    if use.name == "__version__":
        return True
    return _constant_documented(use.module, use.name)


ALL_USES = [use for shell in SHELLS for use in _uses(shell)]


def test_the_walk_finds_what_the_shells_use():
    # A guard on the walker itself: it sees plain imports, imports inside functions and module attributes.
    found = {(u.module, u.name) for u in ALL_USES}
    assert ("linkfold.ingest", "ingest_dump") in found
    assert ("linkfold.store", "make_engine") in found
    assert any(m == "linkfold.store.rulesets" for m, _ in found)  # imported under another name
    assert any(m == "linkfold.store.datasets" for m, _ in found)
    assert len(ALL_USES) > 50
    # ...and its rules flag what they must (names taken from the package, not from the shells).
    assert _private_parts(Use("x.py", 1, "linkfold.store.datasets", "_chunks")) == ["_chunks"]
    assert _private_parts(Use("x.py", 1, "linkfold.canon._parse", "simple_match")) == ["_parse"]
    assert _private_parts(Use("x.py", 1, "linkfold._tabular", "csv_cell")) == []
    assert not _documented(Use("x.py", 1, "linkfold.progress", "_Silent"))  # a class without a docstring
    assert _documented(Use("x.py", 1, "linkfold.store.linkage", "LINK_COLUMNS")) is False  # no #: comment
    assert _documented(Use("x.py", 1, "linkfold.exposure", "LEVELS"))  # #: comment, through a re-export


@pytest.mark.parametrize("shell", SHELLS)
def test_every_name_the_shells_use_is_public(shell):
    private = [f"{use} ({', '.join(_private_parts(use))})" for use in ALL_USES
               if use.file.startswith(shell) and _private_parts(use)]
    assert not private, "the CLI and the API may use only public names:\n" + "\n".join(private)


@pytest.mark.parametrize("shell", SHELLS)
def test_every_name_the_shells_use_is_documented(shell):
    undocumented = sorted({str(use) for use in ALL_USES if use.file.startswith(shell) and not _documented(use)})
    assert not undocumented, "give these a docstring (or a #: comment):\n" + "\n".join(undocumented)
