"""`linkfold demo --workdir DIR` never deletes what it did not create (issue 15, item 9: it used to empty
whatever folder it was given, a home folder included)."""

from __future__ import annotations

import subprocess
import sys

import pytest

from linkfold.demo import DEMO_FILES, DEMO_MARKER, prepare_workdir
from linkfold.errors import InputError


def test_a_new_folder_is_made_and_marked(tmp_path):
    db = prepare_workdir(tmp_path / "new" / "demo")
    assert db == tmp_path / "new" / "demo" / "demo.db"
    assert (tmp_path / "new" / "demo" / DEMO_MARKER).is_file()
    assert not db.exists()


def test_an_empty_folder_is_taken(tmp_path):
    assert prepare_workdir(tmp_path) == tmp_path / "demo.db"
    assert (tmp_path / DEMO_MARKER).is_file()


def test_a_folder_with_a_users_file_is_refused_and_keeps_the_file(tmp_path):
    notes = tmp_path / "thesis.txt"
    notes.write_text("three years of work", encoding="utf-8")
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "panel.csv").write_text("url\n", encoding="utf-8")
    with pytest.raises(InputError) as err:
        prepare_workdir(tmp_path)
    assert str(tmp_path) in str(err.value) and "thesis.txt" in str(err.value)
    assert notes.read_text(encoding="utf-8") == "three years of work"
    assert (tmp_path / "data" / "panel.csv").is_file()
    assert not (tmp_path / DEMO_MARKER).exists()


def test_a_folder_with_a_stray_demo_db_but_no_marker_is_refused(tmp_path):
    # demo.db alone proves nothing: it may be the user's own file of that name.
    (tmp_path / "demo.db").write_bytes(b"someone else's database")
    with pytest.raises(InputError):
        prepare_workdir(tmp_path)
    assert (tmp_path / "demo.db").read_bytes() == b"someone else's database"


def test_a_file_is_refused(tmp_path):
    target = tmp_path / "file"
    target.write_text("x", encoding="utf-8")
    with pytest.raises(InputError, match="not a folder"):
        prepare_workdir(target)
    assert target.read_text(encoding="utf-8") == "x"


def test_a_demo_folder_is_reused_removing_only_the_demos_files(tmp_path):
    prepare_workdir(tmp_path)
    for name in DEMO_FILES:
        (tmp_path / name).write_bytes(b"old registry")
    mine = tmp_path / "my-notes.md"
    mine.write_text("kept", encoding="utf-8")
    (tmp_path / "exports").mkdir()
    (tmp_path / "exports" / "a.csv").write_text("kept", encoding="utf-8")
    db = prepare_workdir(tmp_path)
    assert not any((tmp_path / name).exists() for name in DEMO_FILES)
    assert not db.exists()
    assert mine.read_text(encoding="utf-8") == "kept"
    assert (tmp_path / "exports" / "a.csv").read_text(encoding="utf-8") == "kept"
    assert (tmp_path / DEMO_MARKER).is_file()


def test_a_symlinked_demo_db_is_unlinked_not_followed(tmp_path):
    target = tmp_path / "precious.db"
    target.write_bytes(b"precious")
    work = tmp_path / "work"
    prepare_workdir(work)
    (work / "demo.db").symlink_to(target)
    prepare_workdir(work)
    assert target.read_bytes() == b"precious"
    assert not (work / "demo.db").exists()


def test_the_command_refuses_a_home_like_folder_with_exit_6(tmp_path):
    home = tmp_path / "home"
    home.mkdir()
    (home / ".profile").write_text("export X=1\n", encoding="utf-8")
    (home / "papers").mkdir()
    proc = subprocess.run([sys.executable, "-m", "linkfold.cli", "demo", "--workdir", str(home)],
                          capture_output=True, text=True, cwd=tmp_path, timeout=120)
    assert proc.returncode == 6, proc.stderr
    assert "not a demo folder" in proc.stderr and str(home) in proc.stderr
    assert sorted(p.name for p in home.iterdir()) == [".profile", "papers"]
