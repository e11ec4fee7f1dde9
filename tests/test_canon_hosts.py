"""Hosts: IDNA against a reference implementation of UTS #46, and the Public Suffix List test vectors."""

from __future__ import annotations

import re
from importlib import resources

import idna
import pytest

from linkfold.canon import PSL_VERSION, canonicalize, parse_rules, registered_domain

NO_FOLDS = parse_rules("[steps]\nhost_prefixes = false\nhttps = false\n", source="no-folds")

# Names chosen to exercise UTS #46 mapping (case, fullwidth, compatibility forms, soft hyphen, ideographic
# full stop), nontransitional processing (ß, ς), and several scripts; the expected ASCII form is whatever
# the reference library says, not a value written here.
IDN_HOSTS = [
    "Bücher.example", "BÜCHER.EXAMPLE", "faß.example", "ＡＢＣ.example", "ελληνικά.test", "ςσ.test",
    "日本語.example", "münchen.test", "straße.test", "ﬁ.example", "Ⅻ.test", "a\u00adb.example",
    "例え.テスト", "x\u3002y.example", "ﾃｽﾄ.example", "İ.test", "नमस्ते.test", "عربي.test", "שלום.test",
    "xn--bcher-kva.example", "ǅ.test",
]


@pytest.mark.parametrize("name", IDN_HOSTS)
def test_idna_matches_reference_library(name: str) -> None:
    # UTS #46 §4 processing (nontransitional, as the WHATWG URL Standard uses it), checked against the
    # general-purpose `idna` package.
    expected = idna.encode(name, uts46=True, transitional=False).decode("ascii")
    assert canonicalize(f"http://{name}/", NO_FOLDS).host == expected


def test_idna_invalid_label_is_refused() -> None:
    # RFC 5891 §4.2.3.1: a label may not start with a combining mark; both libraries refuse it.
    with pytest.raises(idna.IDNAError):
        idna.encode("\u0301a.test", uts46=True)
    with pytest.raises(Exception) as err:
        canonicalize("http://\u0301a.test/")
    assert getattr(err.value, "reason", None) in {"bad_host", "unparsable"}


def _psl_vectors() -> list:
    # The Public Suffix List project's own test file (checkPublicSuffix(input, expected)), as shipped with
    # the publicsuffixlist package.
    text = resources.files("publicsuffixlist").joinpath("test_psl.txt").read_text(encoding="utf-8")
    out = []
    for line in text.splitlines():
        m = re.match(r"^checkPublicSuffix\((null|'[^']*'), (null|'[^']*')\);", line.strip())
        if m and m.group(1) != "null":
            out.append((m.group(1).strip("'"), None if m.group(2) == "null" else m.group(2).strip("'")))
    assert len(out) > 60
    return out


def _ascii(name: str) -> str:
    return idna.encode(name, uts46=True).decode("ascii") if not name.isascii() else name.lower()


@pytest.mark.parametrize(("host", "expected"), _psl_vectors())
def test_public_suffix_list_vectors(host: str, expected: str | None) -> None:
    # publicsuffix.org test vectors; hosts are given to registered_domain in their ASCII form, the form
    # the canonicaliser produces.
    got = registered_domain(_ascii(host) if not host.startswith(".") else host)
    assert got == (None if expected is None else _ascii(expected))


@pytest.mark.parametrize(("host", "expected"), [
    ("daily.example", "daily.example"),       # unlisted TLD: the default rule "*" (PSL algorithm, step 2)
    ("a.b.daily.example", "daily.example"),
    ("news.co.uk", "news.co.uk"),             # from memory: co.uk is an ICANN-section suffix
    ("co.uk", None),
    ("127.0.0.1", None),                      # IP literals have no registered domain
    ("[::1]", None),
    ("localhost", None),
    ("daily.example.", "daily.example"),      # a trailing root dot is ignored
])
def test_registered_domain(host: str, expected: str | None) -> None:
    assert registered_domain(host) == expected


def test_psl_version_is_recorded() -> None:
    # The package version carries the list's date; rulesets record it (PITFALLS.md "Public Suffix List").
    assert re.match(r"^\d+\.\d+\.\d+\.\d{8}$", PSL_VERSION)
