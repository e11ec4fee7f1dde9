"""Charset sniffing and Content-Type parsing, checked against the WHATWG standards and reference libraries.

References: the WHATWG Encoding standard's label table as implemented by ``webencodings`` (a reference
implementation of that table), the HTML standard's encoding sniffing as implemented by ``html5lib``
(a general-purpose HTML5 parser), and Python's ``email`` package for RFC 9110 media-type parameters.
"""

from __future__ import annotations

import email.message

import pytest
import webencodings
from html5lib._inputstream import HTMLBinaryInputStream
from webencodings.labels import LABELS as WHATWG_LABELS

from linkfold.content.charset import (
    EncodingChoice,
    decode_html,
    decode_with,
    encoding_from_meta_content,
    lookup_label,
    prescan,
    sniff_encoding,
)
from linkfold.content.mediatype import is_html, looks_like_html, parse_content_type

# --- labels (WHATWG Encoding §4.2) --------------------------------------------------------------------

@pytest.mark.parametrize("label", sorted(WHATWG_LABELS))
def test_every_whatwg_label_maps_like_the_reference(label):
    # WHATWG Encoding §4.2 "Names and labels", via webencodings' copy of the table.
    assert lookup_label(label) == WHATWG_LABELS[label]


@pytest.mark.parametrize("label,expected", [
    ("  Latin1\t", "windows-1252"),   # §4.2: strip ASCII whitespace, ASCII case-insensitive
    ("ISO-8859-1", "windows-1252"),   # §4.2: iso-8859-1 is a label of windows-1252
    ("US-ASCII", "windows-1252"),
    ("utf8", "utf-8"),
    ("no-such-charset", None),
    ("", None),
])
def test_label_lookup_rules(label, expected):
    assert lookup_label(label) == expected
    ref = webencodings.lookup(label)
    assert (ref.name if ref else None) == expected


# --- windows-1252 and friends (WHATWG Encoding index tables) -------------------------------------------

def test_windows_1252_index_values():
    # WHATWG index-windows-1252 (values from memory): 0x80 is the euro sign, 0x9F is Ÿ, and the five bytes
    # Python's cp1252 leaves undefined decode to the C1 control of the same value instead of failing.
    assert decode_with("windows-1252", b"\x80\x9f\xe9") == "\u20ac\u0178\u00e9"
    assert decode_with("windows-1252", b"\x81\x8d\x8f\x90\x9d") == "\x81\x8d\x8f\x90\x9d"


def test_x_user_defined_maps_high_bytes_to_private_use():
    # WHATWG Encoding §14.5: byte b >= 0x80 decodes to U+F780 + (b - 0x80).
    assert decode_with("x-user-defined", b"A\x80\xff") == "A\uf780\uf7ff"


def test_replacement_encoding_yields_one_replacement_character():
    # WHATWG Encoding §14.1: the replacement decoder emits a single U+FFFD for any non-empty input.
    assert decode_html(b"<p>hello</p>", "text/html; charset=iso-2022-kr") == "\ufffd"


def test_decode_strips_bom_and_bom_overrides_label():
    # WHATWG Encoding §6 "decode": a BOM wins over the encoding passed in and is removed.
    assert decode_with("windows-1252", b"\xef\xbb\xbfcaf\xc3\xa9") == "café"
    assert decode_with("utf-8", "\ufeffhi".encode("utf-16-le")) == "hi"


def test_invalid_utf8_becomes_replacement_characters():
    # WHATWG Encoding: the UTF-8 decoder in replacement mode emits U+FFFD for an invalid byte.
    assert decode_with("utf-8", b"a\xffb") == "a\ufffdb"


# --- the sniffing order (HTML §13.2.3.2) ---------------------------------------------------------------

_META_1251 = b'<html><head><meta charset="windows-1251"><title>t</title></head><body>\xcf\xf0\xe8</body>'

@pytest.mark.parametrize("body,ctype,expected", [
    # BOM first, over the header (HTML §13.2.3.2 step 1)
    (b"\xef\xbb\xbf<p>x</p>", "text/html; charset=windows-1252", EncodingChoice("utf-8", "bom")),
    (b"\xff\xfe<\x00p\x00>\x00", "text/html; charset=utf-8", EncodingChoice("utf-16le", "bom")),
    (b"\xfe\xff\x00<\x00p", None, EncodingChoice("utf-16be", "bom")),
    # then the transport layer (step 4) over <meta>
    (_META_1251, "text/html; charset=KOI8-R", EncodingChoice("koi8-r", "http")),
    # an unknown header label is ignored ("if it is supported")
    (_META_1251, "text/html; charset=x-unheard-of", EncodingChoice("windows-1251", "meta")),
    # then the prescan (step 5)
    (_META_1251, "text/html", EncodingChoice("windows-1251", "meta")),
    (_META_1251, None, EncodingChoice("windows-1251", "meta")),
    # then our autodetection and the default (steps 8 and 9)
    ("<p>café</p>".encode(), None, EncodingChoice("utf-8", "utf8")),
    (b"<p>caf\xe9</p>", None, EncodingChoice("windows-1252", "default")),
])
def test_sniff_order(body, ctype, expected):
    assert sniff_encoding(body, ctype) == expected


@pytest.mark.parametrize("body,ctype", [
    (b"\xef\xbb\xbf<p>x</p>", "text/html; charset=windows-1252"),
    (b"\xff\xfe<\x00p\x00>\x00", "text/html; charset=utf-8"),
    (_META_1251, "text/html; charset=KOI8-R"),
    (_META_1251, None),
    (b'<meta http-equiv="Content-Type" content="text/html; charset=iso-8859-2"><p>x', None),
    (b"<!doctype html><html lang=en><head><title>x</title><meta charset=shift_jis>", None),
])
def test_sniff_agrees_with_html5lib(body, ctype):
    # html5lib implements the same algorithm (BOM, transport, prescan); without autodetection it falls back
    # to windows-1252, so only cases decided before our utf8 step are compared.
    media = parse_content_type(ctype)
    stream = HTMLBinaryInputStream(body, transport_encoding=media.charset if media else None,
                                   useChardet=False)
    assert sniff_encoding(body, ctype).name == stream.charEncoding[0].name


# --- the prescan itself --------------------------------------------------------------------------------

# html5lib 1.1 follows an older revision of the prescan on these two points (it wants a separate "-->" after
# "<!--", and returns x-user-defined as declared); the current standard's text is what we implement.
_HTML5LIB_OLDER = {b'<!--><meta charset="iso-8859-5">', b'<meta charset="x-user-defined">'}

@pytest.mark.parametrize("data,expected", [
    (b'<meta charset="utf-8">', "utf-8"),
    (b"<META CHARSET=ISO-8859-2>", "iso-8859-2"),
    (b"<meta charset='koi8-r'/>", "koi8-r"),
    (b'<meta http-equiv="content-type" content="text/html; charset=windows-1251">', "windows-1251"),
    (b"<meta content='text/html; charset=\"windows-1251\"' http-equiv=Content-Type>", "windows-1251"),
    # a content charset without the http-equiv pragma does not count (need pragma, got none)
    (b'<meta content="text/html; charset=windows-1251">', None),
    # the first of two attributes with the same name wins
    (b'<meta charset="koi8-r" charset="utf-8">', "koi8-r"),
    # a declaration inside a comment is skipped; "<!-->" closes a comment at once
    (b'<!-- <meta charset="koi8-r"> --><meta charset="iso-8859-5">', "iso-8859-5"),
    (b'<!--><meta charset="iso-8859-5">', "iso-8859-5"),
    # attributes of other tags are consumed as attributes, so a quoted ">" does not end the tag early
    (b'<p title="<meta charset=koi8-r>"><meta charset="iso-8859-7">', "iso-8859-7"),
    # UTF-16 declared in an ASCII-compatible document means UTF-8; x-user-defined means windows-1252
    (b'<meta charset="utf-16le">', "utf-8"),
    (b'<meta charset="x-user-defined">', "windows-1252"),
    # an unknown label is a failure: look on for another meta
    (b'<meta charset="bogus"><meta charset="koi8-u">', "koi8-u"),
    # "<metadata" is not "<meta" (it must be followed by space or "/")
    (b'<metadata charset="koi8-r">', None),
    (b"<p>no declaration at all</p>", None),
])
def test_prescan(data, expected):
    assert prescan(data) == expected
    if expected is None or data in _HTML5LIB_OLDER:
        return
    # html5lib's EncodingParser implements the same prescan (HTML §13.2.3.2).
    ref = HTMLBinaryInputStream(data, useChardet=False, default_encoding="windows-1252")
    assert ref.charEncoding == (webencodings.lookup(expected), "tentative")


def test_prescan_looks_only_at_the_first_1024_bytes():
    # HTML §13.2.3.2: the prescan is applied to the first 1024 bytes.
    late = b"<p>" + b"x" * 1100 + b'<meta charset="koi8-r">'
    assert sniff_encoding(late, None) == EncodingChoice("utf-8", "utf8")


@pytest.mark.parametrize("content,expected", [
    # HTML §2.6.4 "algorithm for extracting a character encoding from a meta element"
    ("text/html; charset=utf-8", "utf-8"),
    ("text/html;charset = 'koi8-r' ", "koi8-r"),
    ('text/html; charset="windows-1251"; foo', "windows-1251"),
    ("text/html; charset='unterminated", None),
    ("text/html; charsetxyz; charset=iso-8859-2", "iso-8859-2"),  # "charset" not followed by "=": go on
    ("text/html; charset=", None),
    ("text/html", None),
])
def test_meta_content_charset(content, expected):
    assert encoding_from_meta_content(content) == expected


# --- Content-Type (RFC 9110 §8.3) ---------------------------------------------------------------------

@pytest.mark.parametrize("value", [
    "text/html; charset=UTF-8",
    'text/html; charset="iso-8859-1"',
    "TEXT/HTML;CHARSET=koi8-r",
    'text/html; foo="a\\"b"; charset=windows-1251',
    "application/xhtml+xml",
])
def test_content_type_agrees_with_email_package(value):
    # Python's email package parses MIME parameters (RFC 2045/2231, the same grammar for these cases).
    msg = email.message.Message()
    msg["Content-Type"] = value
    ours = parse_content_type(value)
    assert ours is not None
    assert ours.essence == msg.get_content_type()
    assert ours.charset == msg.get_param("charset")


@pytest.mark.parametrize("value", [None, "", "html", "text/", "/html", "text/ht ml"])
def test_content_type_rejects_nonsense(value):
    assert parse_content_type(value) is None


# --- is it HTML? (WHATWG MIME Sniffing §7.1) -----------------------------------------------------------

@pytest.mark.parametrize("pattern", [
    # The HTML rows of MIME Sniffing §7.1 (listed from memory), each followed by a tag-terminating byte.
    "<!DOCTYPE HTML", "<HTML", "<HEAD", "<SCRIPT", "<IFRAME", "<H1", "<DIV", "<FONT", "<TABLE", "<A",
    "<STYLE", "<TITLE", "<B", "<BODY", "<BR", "<P", "<!--",
])
def test_html_sniff_patterns(pattern):
    assert looks_like_html(b"  \n" + pattern.encode() + b">")
    assert looks_like_html(pattern.lower().encode() + b" ")
    assert not looks_like_html(pattern.encode() + b"X")  # no tag-terminating byte


def test_is_html_trusts_a_definite_type_and_sniffs_an_unknown_one():
    page = b"<!doctype html><html><body>x</body></html>"
    assert is_html("text/html; charset=utf-8", b"")
    assert is_html("application/xhtml+xml", b"")
    assert not is_html("image/png", page)
    assert not is_html("application/pdf", page)
    assert is_html(None, page)
    assert is_html("application/octet-stream", page)
    assert not is_html(None, b"%PDF-1.7")
    assert not is_html(None, b'{"json": true}')
