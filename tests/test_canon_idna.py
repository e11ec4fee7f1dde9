"""``xn--`` host labels (issue 15, item 9): UTS #46 §4 step 4 on top of the WHATWG parser, which passes
ASCII labels through unchecked; and a host ending in ``..`` (an empty label before the root).

Sources: RFC 3492 §7.1 (Punycode samples, tests/cases/rfc3492_punycode.tsv); UTS #46 conformance data
IdnaTestV2.txt for Unicode 13.0.0 (the lines with ASCII ``xn--`` sources, tests/cases/IdnaTestV2-xn-labels.txt,
whose header says which lines were left out and why); the ``idna`` package as a general-purpose reference.
"""

from __future__ import annotations

import csv
import re
from pathlib import Path

import idna
import pytest

from linkfold.canon import canonicalize
from linkfold.canon._idna import punycode_decode, xn_label_problem
from linkfold.errors import InvalidURL
from test_canon_cases import SYNTAX_ONLY

CASES = Path(__file__).parent / "cases"
# The WHATWG URL Standard's profile of UTS #46: CheckHyphens=false (V2, V3), UseSTD3ASCIIRules=false (U1).
IGNORED_STATUS = {"V2", "V3", "U1"}


def _unescape(text: str) -> str:
    text = re.sub(r"\\x\{([0-9A-Fa-f]+)\}", lambda m: chr(int(m.group(1), 16)), text)
    return re.sub(r"\\u([0-9A-Fa-f]{4})", lambda m: chr(int(m.group(1), 16)), text)


def _punycode_rows() -> list:
    with (CASES / "rfc3492_punycode.tsv").open(encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh, delimiter="\t", quoting=csv.QUOTE_NONE))
    assert len(rows) == 19  # samples (A) to (S)
    return [pytest.param(r, id=r["label"]) for r in rows]


@pytest.mark.parametrize("row", _punycode_rows())
def test_punycode_decodes_the_rfc_3492_samples(row: dict) -> None:
    assert punycode_decode(row["punycode"]) == _unescape(row["unicode"]), row["source"]


@pytest.mark.parametrize("text", ["", "a", "abc-", "ab-a", "3B-ww4c5e180e575a65lsy2b"])
def test_punycode_basic_only_and_short_inputs(text: str) -> None:
    # RFC 3492 §6.2: code points before the last delimiter are copied; "a" alone is the delta digit 0,
    # which terminates at once (t = 1), giving U+0080. Checked against the Python standard library's codec.
    expected = text.encode("ascii").decode("punycode") if text else ""
    assert punycode_decode(text) == expected


@pytest.mark.parametrize("text", ["zz", "99999999999", "a&b", "\u00e9-abc", "abc-\u00e9", "0", "-"])
def test_punycode_refuses_what_rfc_3492_cannot_decode(text: str) -> None:
    # "-": no code point precedes the delimiter, so §6.2 does not consume it, and "-" is not a digit
    # (the standard library's codec is laxer here and returns "").
    assert punycode_decode(text) is None


def _conformance_rows() -> list:
    rows = []
    for line in (CASES / "IdnaTestV2-xn-labels.txt").read_text(encoding="utf-8").splitlines():
        body = line.split("#", 1)[0]
        if not body.strip():
            continue
        number = line.split("# line ", 1)[1].split(":", 1)[0].split()[0]
        cols = [c.strip() for c in body.split(";")] + [""] * 7
        source = _unescape(cols[0])
        to_unicode = _unescape(cols[1]) or source
        status = cols[4] if cols[4] else cols[2]
        codes = {c.strip() for c in status.strip().strip("[]").split(",") if c.strip()} - IGNORED_STATUS
        to_ascii = _unescape(cols[3]) or to_unicode
        rows.append(pytest.param(source, to_ascii, sorted(codes), id=f"line{number}"))
    assert len(rows) > 1500
    return rows


@pytest.mark.parametrize(("source", "to_ascii", "codes"), _conformance_rows())
def test_uts46_conformance_for_xn_labels(source: str, to_ascii: str, codes: list[str]) -> None:
    # IdnaTestV2.txt (Unicode 13.0.0): toAsciiN with nontransitional processing. An error status means the
    # host is refused; no error means the canonical host is the toAsciiN value (root dot aside).
    if codes:
        with pytest.raises(InvalidURL) as err:
            canonicalize(f"http://{source}/", SYNTAX_ONLY)
        assert err.value.reason == "bad_host", codes
    else:
        assert canonicalize(f"http://{source}/", SYNTAX_ONLY).host == to_ascii.lower().rstrip(".")


@pytest.mark.parametrize("label", ["xn--bcher-kva", "xn--fa-hia", "xn--mgbh0fb",
                                   "xn--p1ai", "xn--wgbh1c", "xn--fiqs8s"])
def test_valid_a_labels_agree_with_the_idna_package(label: str) -> None:
    # The idna package (IDNA 2008 with UTS #46 mapping) decodes and re-encodes each label unchanged. Only
    # letters here: IDNA 2008 disallows symbols that UTS #46 (and so the WHATWG parser) allows, such as
    # xn--ls8h, which both accept below through the conformance data's profile.
    assert idna.encode(idna.decode(label), uts46=True).decode("ascii") == label
    assert xn_label_problem(label) is None
    assert canonicalize(f"https://{label}.example/").host == f"{label}.example"


@pytest.mark.parametrize(("label", "why"), [
    ("xn--a", "decodes to U+0080, a control character"),
    ("xn--", "nothing after the prefix"),
    ("xn--zz", "a delta that never terminates: not Punycode"),
    ("xn--abc-", "decodes to 'abc', all ASCII (UTS #46 §4 step 4, Unicode 15.1)"),
    ("xn--bcher-kva9", "trailing digits that do not terminate a delta"),
    ("xn--0ca0ea", "whatever it decodes to, our verdict and the reference's agree"),
])
def test_invalid_a_labels_are_refused_like_the_idna_package_refuses_them(label: str, why: str) -> None:
    try:
        reference_ok = idna.encode(idna.decode(label), uts46=True).decode("ascii") == label
    except idna.IDNAError:
        reference_ok = False
    ours_ok = xn_label_problem(label) is None
    assert ours_ok == reference_ok, why
    if not ours_ok:
        with pytest.raises(InvalidURL) as err:
            canonicalize(f"https://{label}.example/a")
        assert err.value.reason == "bad_host" and label in err.value.detail


def test_upper_case_xn_labels_are_mapped_first() -> None:
    # UTS #46 §4 step 1 maps upper case to lower case before labels are checked; the parser does that.
    assert canonicalize("https://XN--BCHER-KVA.example/").host == "xn--bcher-kva.example"


def test_a_label_that_encodes_a_mapped_character_is_refused() -> None:
    # Punycode that decodes to an upper-case letter is not a valid U-label: UTS #46 maps U+00DC to U+00FC,
    # so the label does not round-trip (§4.1 V6 with nontransitional processing). The parser lower-cases
    # ASCII before we see the label, so the mapped letter has to be a non-ASCII one.
    label = "xn--" + "b\u00dccher".encode("punycode").decode("ascii")
    assert label != "xn--bcher-kva" and label == label.lower()
    assert xn_label_problem(label) is not None
    with pytest.raises(InvalidURL):
        canonicalize(f"https://{label}.example/")


@pytest.mark.parametrize("url", ["https://a.example../x", "https://daily.example../", "https://a../",
                                 "https://a.example.../"])
def test_a_host_ending_in_two_dots_has_an_empty_label(url: str) -> None:
    # RFC 1034 §3.1: one trailing dot is the root; a second is an empty label.
    with pytest.raises(InvalidURL) as err:
        canonicalize(url)
    assert err.value.reason == "bad_host" and "empty label" in err.value.detail


def test_one_trailing_dot_is_still_the_root() -> None:
    assert canonicalize("https://daily.example./a").url == "https://daily.example/a"


def test_a_rules_file_naming_an_invalid_a_label_host_is_an_error() -> None:
    from linkfold.canon import parse_rules
    from linkfold.errors import RulesError

    with pytest.raises(RulesError) as err:
        parse_rules('[site."xn--a.example"]\noutlet = "X"\n', source="lab.toml")
    assert "lab.toml:1" in str(err.value)
    assert parse_rules('[site."xn--bcher-kva.example"]\noutlet = "B"\n', source="ok").sites
