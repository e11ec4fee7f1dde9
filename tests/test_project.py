"""The README/CI contract and the demo, checked as a newcomer would meet them."""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _readme_commands() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## The two commands", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```sh\n(.+?)\n```", section, flags=re.S)


def test_readme_opens_with_the_job_and_gives_two_commands():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    first_paragraph = text.split("\n\n", 2)[1]
    assert "linkfold" in first_paragraph and "stable" in first_paragraph
    demo, tests = _readme_commands()
    assert "linkfold demo" in demo
    assert "[test]" in tests and "pytest" in tests


def test_ci_runs_exactly_the_readme_test_command():
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    block = ci.split("# >>> README test command", 1)[1].split("# <<< README test command", 1)[0]
    ci_command = [ln for ln in block.splitlines() if ln.strip() and not ln.startswith("#")][-1].strip()
    assert ci_command == _readme_commands()[1].strip()


def test_readme_carries_the_personal_data_cautions():
    text = " ".join((ROOT / "README.md").read_text(encoding="utf-8").lower().split())
    for phrase in ("personal data", "data protection", "ethics", "pseudonymised", "robots.txt", "terms"):
        assert phrase in text, phrase


def test_demo_runs_in_a_fresh_folder(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "linkfold.cli", "demo", "--workdir", str(tmp_path / "d")],
                          capture_output=True, text=True, cwd=tmp_path, timeout=600)
    assert proc.returncode == 0, proc.stderr
    assert "registry:" in proc.stdout
    assert (tmp_path / "d" / "demo.db").is_file()
    # The two invented dumps are loaded; the two bad URLs the panel carries are rejects, not losses, and
    # its row without a URL is counted, not rejected.
    assert "dataset 'northvale-panel'" in proc.stdout and "dataset 'northvale-posts'" in proc.stdout
    assert "rejects 2" in proc.stdout and "1 row without a URL" in proc.stdout
    # Variants of one article fold onto one canonical URL.
    canon = [ln.split("-> ", 1)[1].split(" (", 1)[0] for ln in proc.stdout.splitlines() if "-> " in ln]
    assert len(canon) == 3 and canon[0] == canon[1]
    # The short link resolves to the same article ID as the variants (redirect evidence).
    ids = [ln.split("article ", 1)[1].split(",", 1)[0] for ln in proc.stdout.splitlines() if "-> " in ln]
    assert len(set(ids)) == 1 and ids[0].startswith("a")
    # The wire story and its syndicated copy on another outlet form one story.
    story = [ln for ln in proc.stdout.splitlines() if "old-mill-bridge-reopens" in ln and ln.strip().startswith("s")]
    assert story and "similar_text" in story[0]


def test_the_readme_python_section_runs_as_written(tmp_path):
    # The "From Python" example, run as a researcher would paste it, in a fresh folder with a small
    # invented panel export beside it (no contact address is set, so nothing leaves the machine).
    import gzip

    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## From Python", 1)[1].split("\n## ", 1)[0]
    code = re.findall(r"```python\n(.+?)\n```", section, flags=re.S)[0]
    assert "linkfold.upgrade_schema(engine)" in code
    with gzip.open(tmp_path / "panel.csv.gz", "wt", encoding="utf-8") as fh:
        fh.write("url,visit_id,visited_at\n"
                 "https://m.daily.example/story/1?utm_source=x,v1,2026-01-02T10:00:00Z\n"
                 "https://daily.example/story/1,v2,2026-01-02T11:00:00Z\n")
    env = {k: v for k, v in os.environ.items() if not k.startswith("LINKFOLD_")}
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=tmp_path,
                          env=env, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert "2 rows, 2 sightings" in proc.stdout
    assert proc.stdout.splitlines()[-1].startswith("https://daily.example/story/1 a")
