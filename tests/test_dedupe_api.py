"""The public face of linkfold.dedupe, and the rule that it stays pure (no I/O, no database)."""

from __future__ import annotations

import ast
import inspect
import pathlib

import linkfold.dedupe as dedupe
from linkfold.settings import SETTINGS

FORBIDDEN_IMPORTS = {"sqlalchemy", "psycopg", "httpx", "socket", "urllib", "requests", "alembic",
                     "linkfold.store", "linkfold.jobs", "linkfold.api", "datasketch"}


def test_all_is_complete_and_importable() -> None:
    for name in dedupe.__all__:
        assert hasattr(dedupe, name), name
    public = {n for n, obj in vars(dedupe).items()
              if not n.startswith("_") and (inspect.isfunction(obj) or inspect.isclass(obj))
              and obj.__module__.startswith("linkfold.dedupe")}
    assert public <= set(dedupe.__all__)


def test_dedupe_modules_are_pure() -> None:
    # DESIGN.md: the maths of dedupe never imports the database or the network, and reads no files;
    # datasketch is the reference in tests and benches only, never the production path.
    root = pathlib.Path(dedupe.__file__).parent
    for path in sorted(root.glob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                names = [("linkfold." + (node.module or "").lstrip(".")) if node.level >= 2 else (node.module or "")]
            else:
                if isinstance(node, ast.Call) and getattr(node.func, "id", None) == "open":
                    raise AssertionError(f"{path.name} opens a file")
                continue
            for name in names:
                assert not any(name == f or name.startswith(f + ".") for f in FORBIDDEN_IMPORTS), (path.name, name)


def test_dedupe_settings_are_declared() -> None:
    names = {s.name for s in SETTINGS}
    assert {"shingle_size", "num_perm", "minhash_seed", "minhash_scheme", "lsh_bands", "lsh_rows",
            "article_threshold", "story_threshold", "title_threshold", "max_date_gap_days",
            "min_words"} <= names
