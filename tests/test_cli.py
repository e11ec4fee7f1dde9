"""The CLI's contract: help everywhere, errors as one line and a documented exit code."""

from __future__ import annotations

import click
import pytest

import linkfold
from linkfold import errors
from linkfold.cli import cli, main
from linkfold.settings import SETTINGS, load_settings

cli.load_all()  # commands are registered on first use; the tests below look at all of them


def _all_commands(group: click.Group, prefix: str = ""):
    for name, cmd in group.commands.items():
        path = f"{prefix}{name}"
        yield path, cmd
        if isinstance(cmd, click.Group):
            yield from _all_commands(cmd, path + " ")


def test_top_level_help_lists_commands_with_descriptions(capsys):
    assert main(["--help"]) == 0
    out = capsys.readouterr().out
    for name, cmd in cli.commands.items():
        if cmd.hidden:  # an old spelling (docs/vocabulary.md): it works, warns, and is not advertised
            assert name not in out.split()
            continue
        assert name in out
        assert cmd.get_short_help_str(), f"{name} has no one-line description"


@pytest.mark.parametrize("path", [p for p, c in _all_commands(cli) if not c.hidden])
def test_every_command_has_help_with_an_example(path):
    cmd = dict(_all_commands(cli))[path]
    text = cmd.help or ""
    assert text.strip(), f"`linkfold {path}` has no help"
    assert "Example" in text, f"`linkfold {path}` help has no example"


def test_linkfold_error_becomes_one_line_and_its_exit_code(capsys, tmp_path):
    missing = tmp_path / "no-such-folder" / "x.db"
    code = main(["--db", f"sqlite:///{missing}", "db", "current"])
    err = capsys.readouterr().err
    assert code == errors.DatabaseError.exit_code
    assert err.startswith("linkfold: error: ") and err.count("\n") == 1


def test_bad_setting_is_a_config_error(monkeypatch, capsys):
    monkeypatch.setenv("LINKFOLD_BATCH_SIZE", "lots")
    assert main(["settings"]) == errors.ConfigError.exit_code
    assert "LINKFOLD_BATCH_SIZE" in capsys.readouterr().err


def test_usage_error_exits_2(capsys):
    assert main(["db", "upgrade", "--no-such-option"]) == 2


def test_db_commands_round_trip(tmp_path, capsys):
    url = f"sqlite:///{tmp_path / 'r.db'}"
    assert main(["--db", url, "db", "upgrade"]) == 0
    assert main(["db", "current", "--db", url]) == 0
    assert "(head)" in capsys.readouterr().out
    assert main(["--db", url, "db", "downgrade", "base"]) == 0
    assert main(["--db", url, "db", "current"]) == 0
    assert "(empty)" in capsys.readouterr().out


def test_schema_behind_head_is_refused_not_migrated(tmp_path, capsys):
    from linkfold._commands._common import Context
    from linkfold.store import make_engine, upgrade

    url = f"sqlite:///{tmp_path / 'old.db'}"
    engine = make_engine(url)
    upgrade(engine, "0001")
    engine.dispose()
    ctx = Context(overrides={"database_url": url})
    with pytest.raises(errors.SchemaError, match="linkfold db upgrade"):
        ctx.engine()
    ctx.close()


def test_every_setting_is_documented():
    for s in SETTINGS:
        assert s.help and len(s.help) > 15, f"setting {s.name} needs help text"
    assert len({s.name for s in SETTINGS}) == len(SETTINGS)
    load_settings(environ={})  # defaults are valid


def test_public_names_are_sorted_and_importable():
    assert linkfold.__all__ == sorted(linkfold.__all__)
    for name in linkfold.__all__:
        assert hasattr(linkfold, name), name


def test_every_error_has_a_distinct_code_and_documented_exit():
    subclasses = [getattr(errors, n) for n in errors.__all__]
    documented = {0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 130}
    for cls in subclasses:
        assert issubclass(cls, errors.LinkfoldError)
        assert cls.exit_code in documented
    codes = [c.code for c in subclasses]
    assert len(codes) == len(set(codes))


def test_the_client_does_not_load_the_pipeline():
    # Other projects import linkfold.client in notebooks: it must stay light (no extraction library,
    # numpy or database driver on import).
    import subprocess
    import sys

    code = ("import sys, linkfold.client; "
            "print(sorted(m for m in ('trafilatura', 'numpy', 'sqlalchemy', 'psycopg') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_every_error_class_is_public():
    assert set(errors.__all__) <= set(linkfold.__all__)


def test_command_table_names_exactly_what_the_modules_register():
    from linkfold.cli import COMMANDS

    assert set(cli.load_all()) == set(COMMANDS)


def test_a_lookup_loads_only_what_it_needs():
    # Scripts call `linkfold lookup` in loops: its start must not import the extraction library, the
    # web framework or numpy, which only other commands use.
    import subprocess
    import sys

    code = ("import sys; from linkfold.cli import main; main(['lookup', '--help']); "
            "print(sorted(m for m in ('trafilatura', 'fastapi', 'numpy', 'warcio') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip().splitlines()[-1] == "[]"
