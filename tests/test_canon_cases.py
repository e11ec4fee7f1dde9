"""Table-driven canonicalisation cases, straight from tests/cases/*.tsv (each row names its source)."""

from __future__ import annotations

import csv
import re
from pathlib import Path

import pytest

from linkfold.canon import canonicalize, load_rules, parse_rules, resolve_reference
from linkfold.errors import InvalidURL

CASES = Path(__file__).parent / "cases"
ROOT = Path(__file__).parent.parent

# Every common-practice fold off: what is left is RFC 3986 §6.2.2/§6.2.3 and the parser's WHATWG
# serialisation, so the RFC's own examples can be checked as written.
SYNTAX_ONLY = parse_rules("""
[steps]
redirect_wrappers = false
amp_cache = false
host_prefixes = false
https = false
session_ids = false
tracking_params = false
amp = false
print_view = false
index_documents = false
trailing_slash = false
sort_params = false
""", source="syntax-only")

RULES = {"": None, "syntax-only": SYNTAX_ONLY, "demo": load_rules(ROOT / "service" / "linkfold" / "demo_data" / "rules" / "demo.toml")}


def _unescape(text: str) -> str:
    # The case file is plain TSV; control characters are written as \uXXXX.
    return re.sub(r"\\u([0-9a-fA-F]{4})", lambda m: chr(int(m.group(1), 16)), text)


def _rows(name: str) -> list:
    with (CASES / name).open(encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t", quoting=csv.QUOTE_NONE))
    assert rows, name
    return [pytest.param(row, id=f"{name}:{i + 2}") for i, row in enumerate(rows)]


# shapes.tsv: link forms recognised by their shape alone (AMP caches, redirect wrappers, share pages).
@pytest.mark.parametrize("row", _rows("canon.tsv") + _rows("shapes.tsv"))
def test_canon_case(row: dict) -> None:
    assert row["source"].strip(), "every case names its source"
    raw, expected, rules = _unescape(row["input"]), row["expected"], RULES[row["rules"]]
    if expected.startswith("!"):
        with pytest.raises(InvalidURL) as err:
            canonicalize(raw, rules)
        assert err.value.reason == expected[1:], row["source"]
        return
    result = canonicalize(raw, rules)
    assert result.url == expected, row["source"]
    # Every expected value is a fixed point too (idempotence, case by case).
    assert canonicalize(result.url, rules).url == expected


@pytest.mark.parametrize("row", _rows("rfc3986_resolution.tsv"))
def test_rfc3986_resolution(row: dict) -> None:
    assert resolve_reference(row["base"], row["reference"]) == row["expected"], row["source"]


def test_rfc3986_6_2_2_example_pair_is_one_canonical() -> None:
    # RFC 3986 §6.2.2: "example://a/b/c/%7Bfoo%7D" and "eXAMPLE://a/./b/../b/%63/%7bfoo%7d" are equivalent
    # (here with the http scheme, which the canonicaliser accepts).
    first = canonicalize("http://a/b/c/%7Bfoo%7D", SYNTAX_ONLY)
    second = canonicalize("hTTP://a/./b/../b/%63/%7bfoo%7d", SYNTAX_ONLY)
    assert first.url == second.url and first.url_key == second.url_key


def test_rfc3986_6_2_3_equivalents_are_one_canonical() -> None:
    # RFC 3986 §6.2.3: these four are equivalent for the http scheme.
    forms = ["http://example.com", "http://example.com/", "http://example.com:/", "http://example.com:80/"]
    assert len({canonicalize(u, SYNTAX_ONLY).url for u in forms}) == 1
