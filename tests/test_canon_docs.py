"""docs/canonical-form.md stays exact: every switch and reason code is documented, the example parses."""

from __future__ import annotations

import re
from pathlib import Path

from linkfold.canon import MAX_URL_LENGTH, SWITCHES, canonicalize, parse_rules

ROOT = Path(__file__).parent.parent
DOC = (ROOT / "docs" / "canonical-form.md").read_text(encoding="utf-8")
SOURCES = "\n".join(p.read_text(encoding="utf-8") for p in (ROOT / "service" / "linkfold" / "canon").glob("*.py"))


def test_every_switch_is_documented() -> None:
    for switch in SWITCHES:
        assert f"`{switch}`" in DOC, switch


def test_every_reason_code_is_documented() -> None:
    reasons = set(re.findall(r'InvalidURL\("([a-z_]+)"', SOURCES)) | set(re.findall(r'_TooDeep\("([a-z_]+)"', SOURCES))
    assert {"empty", "not_http", "too_long", "control_chars", "too_deep"} <= reasons
    for reason in reasons:
        assert f"`{reason}`" in DOC, reason
    assert str(MAX_URL_LENGTH) in DOC


def test_every_step_name_is_documented() -> None:
    names = set(re.findall(r'steps\.append\("([a-z_]+)"\)', SOURCES)) | set(re.findall(r'return "([a-z_]+)", ', SOURCES))
    assert "site_params" in names and "whatwg" in names
    for name in names:
        assert f"`{name}`" in DOC, name


def test_the_documented_example_is_a_valid_rules_file() -> None:
    example = DOC.split("```toml")[1].split("```")[0]
    rules = parse_rules(example, source="docs example")
    assert len(rules.sites) == 3


def test_the_documented_python_example_holds() -> None:
    c = canonicalize("http://www.Northvale-Herald.example/news/2026/10/night-market-trial/amp?utm_source=x#top")
    assert c.url == "https://northvale-herald.example/news/2026/10/night-market-trial"
    assert f"'{c.url}'" in DOC and str(c.steps) in DOC
