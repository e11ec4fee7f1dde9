"""Turning the bytes of an HTML page into text, the way a browser would.

The order follows the encoding sniffing algorithm of the WHATWG HTML standard (§13.2.3.2 "Determining the
character encoding"), minus the steps that only make sense inside a browser (user override, parent
frames, previous visits):

1. **BOM** — a UTF-8 or UTF-16 byte order mark wins over everything, the HTTP header included
   (the standard's first step: "BOM sniffing").
2. **HTTP** — the ``charset`` parameter of the Content-Type header, if it names an encoding we know.
3. **meta** — the standard's *prescan*: ``<meta charset>`` or ``<meta http-equiv="Content-Type"
   content="…; charset=…">`` within the first 1024 bytes, implemented step by step from the standard.
4. **utf8** — our autodetection (the standard lets the user agent guess): bytes that decode as strict
   UTF-8 are UTF-8; mis-decoding a legacy page as UTF-8 is nearly impossible by accident.
5. **default** — windows-1252, the standard's suggested default for most locales.

Labels are mapped to encodings with the WHATWG Encoding standard's label table (the subset of encodings
Python has a codec for); "iso-8859-1", "latin1" and "ascii" mean windows-1252 there, as in browsers.
"""

from __future__ import annotations

import codecs
from dataclasses import dataclass

from .mediatype import parse_content_type

# WHATWG Encoding standard §4.2 "Names and labels": encoding name -> (Python codec, labels).
# Written from the standard as remembered; every label is checked against a reference implementation of
# that table in the tests. Python codecs are chosen for the decoder the standard specifies: its "gbk"
# decoder is the gb18030 decoder, "Shift_JIS" is Microsoft's superset (cp932), "EUC-KR" is cp949, "Big5"
# includes HKSCS.
_ENCODINGS: dict[str, tuple[str, tuple[str, ...]]] = {
    "utf-8": ("utf-8", ("unicode-1-1-utf-8", "unicode11utf8", "unicode20utf8", "utf-8", "utf8",
                        "x-unicode20utf8")),
    "ibm866": ("cp866", ("866", "cp866", "csibm866", "ibm866")),
    "iso-8859-2": ("iso8859_2", ("csisolatin2", "iso-8859-2", "iso-ir-101", "iso8859-2", "iso88592",
                                 "iso_8859-2", "iso_8859-2:1987", "l2", "latin2")),
    "iso-8859-3": ("iso8859_3", ("csisolatin3", "iso-8859-3", "iso-ir-109", "iso8859-3", "iso88593",
                                 "iso_8859-3", "iso_8859-3:1988", "l3", "latin3")),
    "iso-8859-4": ("iso8859_4", ("csisolatin4", "iso-8859-4", "iso-ir-110", "iso8859-4", "iso88594",
                                 "iso_8859-4", "iso_8859-4:1988", "l4", "latin4")),
    "iso-8859-5": ("iso8859_5", ("csisolatincyrillic", "cyrillic", "iso-8859-5", "iso-ir-144", "iso8859-5",
                                 "iso88595", "iso_8859-5", "iso_8859-5:1988")),
    "iso-8859-6": ("iso8859_6", ("arabic", "asmo-708", "csiso88596e", "csiso88596i", "csisolatinarabic",
                                 "ecma-114", "iso-8859-6", "iso-8859-6-e", "iso-8859-6-i", "iso-ir-127",
                                 "iso8859-6", "iso88596", "iso_8859-6", "iso_8859-6:1987")),
    "iso-8859-7": ("iso8859_7", ("csisolatingreek", "ecma-118", "elot_928", "greek", "greek8",
                                 "iso-8859-7", "iso-ir-126", "iso8859-7", "iso88597", "iso_8859-7",
                                 "iso_8859-7:1987", "sun_eu_greek")),
    "iso-8859-8": ("iso8859_8", ("csiso88598e", "csisolatinhebrew", "hebrew", "iso-8859-8", "iso-8859-8-e",
                                 "iso-ir-138", "iso8859-8", "iso88598", "iso_8859-8", "iso_8859-8:1988",
                                 "visual")),
    "iso-8859-8-i": ("iso8859_8", ("csiso88598i", "iso-8859-8-i", "logical")),
    "iso-8859-10": ("iso8859_10", ("csisolatin6", "iso-8859-10", "iso-ir-157", "iso8859-10", "iso885910",
                                   "l6", "latin6")),
    "iso-8859-13": ("iso8859_13", ("iso-8859-13", "iso8859-13", "iso885913")),
    "iso-8859-14": ("iso8859_14", ("iso-8859-14", "iso8859-14", "iso885914")),
    "iso-8859-15": ("iso8859_15", ("csisolatin9", "iso-8859-15", "iso8859-15", "iso885915", "iso_8859-15",
                                   "l9")),
    "iso-8859-16": ("iso8859_16", ("iso-8859-16",)),
    "koi8-r": ("koi8_r", ("cskoi8r", "koi", "koi8", "koi8-r", "koi8_r")),
    "koi8-u": ("koi8_u", ("koi8-ru", "koi8-u")),
    "macintosh": ("mac_roman", ("csmacintosh", "mac", "macintosh", "x-mac-roman")),
    "windows-874": ("cp874", ("dos-874", "iso-8859-11", "iso8859-11", "iso885911", "tis-620",
                              "windows-874")),
    "windows-1250": ("cp1250", ("cp1250", "windows-1250", "x-cp1250")),
    "windows-1251": ("cp1251", ("cp1251", "windows-1251", "x-cp1251")),
    "windows-1252": ("cp1252", ("ansi_x3.4-1968", "ascii", "cp1252", "cp819", "csisolatin1", "ibm819",
                                "iso-8859-1", "iso-ir-100", "iso8859-1", "iso88591", "iso_8859-1",
                                "iso_8859-1:1987", "l1", "latin1", "us-ascii", "windows-1252", "x-cp1252")),
    "windows-1253": ("cp1253", ("cp1253", "windows-1253", "x-cp1253")),
    "windows-1254": ("cp1254", ("cp1254", "csisolatin5", "iso-8859-9", "iso-ir-148", "iso8859-9",
                                "iso88599", "iso_8859-9", "iso_8859-9:1989", "l5", "latin5", "windows-1254",
                                "x-cp1254")),
    "windows-1255": ("cp1255", ("cp1255", "windows-1255", "x-cp1255")),
    "windows-1256": ("cp1256", ("cp1256", "windows-1256", "x-cp1256")),
    "windows-1257": ("cp1257", ("cp1257", "windows-1257", "x-cp1257")),
    "windows-1258": ("cp1258", ("cp1258", "windows-1258", "x-cp1258")),
    "x-mac-cyrillic": ("mac_cyrillic", ("x-mac-cyrillic", "x-mac-ukrainian")),
    "gbk": ("gb18030", ("chinese", "csgb2312", "csiso58gb231280", "gb2312", "gb_2312", "gb_2312-80", "gbk",
                        "iso-ir-58", "x-gbk")),
    "gb18030": ("gb18030", ("gb18030",)),
    "big5": ("big5hkscs", ("big5", "big5-hkscs", "cn-big5", "csbig5", "x-x-big5")),
    "euc-jp": ("euc_jp", ("cseucpkdfmtjapanese", "euc-jp", "x-euc-jp")),
    "iso-2022-jp": ("iso2022_jp", ("csiso2022jp", "iso-2022-jp")),
    "shift_jis": ("cp932", ("csshiftjis", "ms932", "ms_kanji", "shift-jis", "shift_jis", "sjis",
                            "windows-31j", "x-sjis")),
    "euc-kr": ("cp949", ("cseuckr", "csksc56011987", "euc-kr", "iso-ir-149", "korean", "ks_c_5601-1987",
                         "ks_c_5601-1989", "ksc5601", "ksc_5601", "windows-949")),
    "utf-16be": ("utf-16-be", ("unicodefffe", "utf-16be")),
    "utf-16le": ("utf-16-le", ("csunicode", "iso-10646-ucs-2", "ucs-2", "unicode", "unicodefeff", "utf-16",
                               "utf-16le")),
    "x-user-defined": ("x-user-defined", ("x-user-defined",)),
    # Labels of encodings browsers refuse to decode (a vector for script injection): the "replacement"
    # decoder turns the whole input into one U+FFFD (WHATWG Encoding §14.1).
    "replacement": ("replacement", ("csiso2022kr", "hz-gb-2312", "iso-2022-cn", "iso-2022-cn-ext",
                                    "iso-2022-kr", "replacement")),
}

_LABELS: dict[str, str] = {label: name for name, (_, labels) in _ENCODINGS.items() for label in labels}

# WHATWG Encoding §4.2: labels are matched after stripping leading and trailing ASCII whitespace.
_ASCII_WS = "\t\n\x0c\r "
_WS_BYTES = b"\t\n\x0c\r "

PRESCAN_BYTES = 1024  # HTML §13.2.3.2: the prescan looks at the first 1024 bytes


@dataclass(frozen=True)
class EncodingChoice:
    """Which encoding a page is decoded with, and which step of the sniffing order chose it.

    ``source`` is one of ``bom``, ``http``, ``meta``, ``utf8``, ``default``.
    """

    name: str
    source: str


def lookup_label(label: str | None) -> str | None:
    """The WHATWG encoding name for ``label`` (e.g. ``"Latin1 "`` → ``"windows-1252"``), or None."""
    if label is None:
        return None
    return _LABELS.get(label.strip(_ASCII_WS).lower())


def _bom(body: bytes) -> str | None:
    # WHATWG Encoding §6 "BOM sniff": only these three byte order marks count.
    if body.startswith(b"\xef\xbb\xbf"):
        return "utf-8"
    if body.startswith(b"\xfe\xff"):
        return "utf-16be"
    if body.startswith(b"\xff\xfe"):
        return "utf-16le"
    return None


def sniff_encoding(body: bytes, content_type: str | None = None) -> EncodingChoice:
    """Choose the encoding of an HTML body (see the module docstring for the order)."""
    bom = _bom(body)
    if bom:
        return EncodingChoice(bom, "bom")
    media = parse_content_type(content_type)
    if media is not None:
        declared = lookup_label(media.charset)
        if declared:
            return EncodingChoice(declared, "http")
    meta = prescan(body[:PRESCAN_BYTES])
    if meta:
        return EncodingChoice(meta, "meta")
    try:
        body.decode("utf-8")
    except UnicodeDecodeError:
        return EncodingChoice("windows-1252", "default")
    return EncodingChoice("utf-8", "utf8")


def _c1_fallback(exc: UnicodeError) -> tuple[str, int]:
    # WHATWG index-windows-1252 maps the five bytes that Python's cp1252 leaves undefined (0x81, 0x8D,
    # 0x8F, 0x90, 0x9D) to the C1 control code point of the same value.
    if isinstance(exc, UnicodeDecodeError):
        return chr(exc.object[exc.start]), exc.start + 1
    raise exc


codecs.register_error("linkfold-c1", _c1_fallback)


def _x_user_defined(data: bytes) -> str:
    # WHATWG Encoding §14.5: ASCII bytes as themselves, 0x80–0xFF to U+F780–U+F7FF.
    return "".join(chr(b) if b < 0x80 else chr(0xF780 + b - 0x80) for b in data)


def decode_with(name: str, body: bytes) -> str:
    """Decode ``body`` with the WHATWG encoding ``name``: BOM stripped, errors become U+FFFD."""
    bom = _bom(body)
    if bom:
        # WHATWG Encoding §6 "decode": a BOM overrides the encoding given, and is not part of the text.
        name = bom
        body = body[3:] if bom == "utf-8" else body[2:]
    if name == "x-user-defined":
        return _x_user_defined(body)
    if name == "replacement":
        return "\ufffd" if body else ""
    codec = _ENCODINGS[name][0]
    errors = "linkfold-c1" if name == "windows-1252" else "replace"
    return body.decode(codec, errors=errors)


def decode_html(body: bytes, content_type: str | None = None) -> str:
    """The text of an HTML page: encoding chosen by :func:`sniff_encoding`, undecodable bytes as U+FFFD."""
    return decode_with(sniff_encoding(body, content_type).name, body)


# --- the prescan (HTML §13.2.3.2 "prescan a byte stream to determine its encoding") -------------------

class _End(Exception):
    """The prescan ran past the bytes it may look at: it gives up (the standard's "abort")."""


def _is_alpha(b: int) -> bool:
    return 0x41 <= b <= 0x5A or 0x61 <= b <= 0x7A


def _get_attribute(data: bytes, pos: int) -> tuple[bytes | None, bytes, int]:
    """The standard's "get an attribute": (name, value, position after it); name None when at ``>``."""
    n = len(data)

    def at(i: int) -> int:
        if i >= n:
            raise _End
        return data[i]

    while at(pos) in b"\t\n\x0c\r /":
        pos += 1
    if at(pos) == 0x3E:  # ">"
        return None, b"", pos
    name = bytearray()
    value = bytearray()
    # step 4: the name
    while True:
        b = at(pos)
        if b == 0x3D and name:  # "=" (not as the first character)
            pos += 1
            break
        if b in _WS_BYTES:
            # step 5: spaces, then maybe "="
            while at(pos) in _WS_BYTES:
                pos += 1
            if at(pos) != 0x3D:
                return bytes(name), b"", pos
            pos += 1
            break
        if b in b"/>":
            return bytes(name), b"", pos
        name.append(b + 0x20 if 0x41 <= b <= 0x5A else b)
        pos += 1
    # step 7: spaces before the value
    while at(pos) in _WS_BYTES:
        pos += 1
    b = at(pos)
    if b in b"\"'":
        quote = b
        pos += 1
        while True:
            c = at(pos)
            pos += 1
            if c == quote:
                return bytes(name), bytes(value), pos
            value.append(c + 0x20 if 0x41 <= c <= 0x5A else c)
    if b == 0x3E:
        return bytes(name), b"", pos
    while True:
        c = at(pos)
        if c in _WS_BYTES or c == 0x3E:
            return bytes(name), bytes(value), pos
        value.append(c + 0x20 if 0x41 <= c <= 0x5A else c)
        pos += 1


def encoding_from_meta_content(content: str) -> str | None:
    """HTML §2.6.4 "algorithm for extracting a character encoding from a meta element" → a label or None."""
    low = content.lower()  # ASCII case-insensitive search for "charset"
    pos = 0
    while True:
        found = low.find("charset", pos)
        if found < 0:
            return None
        pos = found + len("charset")
        while pos < len(content) and content[pos] in _ASCII_WS:
            pos += 1
        if pos < len(content) and content[pos] == "=":
            break
        # not followed by "=": look for the next occurrence after this one
    pos += 1
    while pos < len(content) and content[pos] in _ASCII_WS:
        pos += 1
    if pos >= len(content):
        return None
    first = content[pos]
    if first in "\"'":
        end = content.find(first, pos + 1)
        return content[pos + 1:end] if end >= 0 else None
    end = pos
    while end < len(content) and content[end] not in _ASCII_WS + ";":
        end += 1
    return content[pos:end]


def prescan(data: bytes) -> str | None:
    """The encoding declared by a ``<meta>`` in ``data`` (the first 1024 bytes), or None."""
    try:
        return _prescan(data)
    except _End:
        return None


def _prescan(data: bytes) -> str | None:
    n = len(data)
    pos = 0
    while pos < n:
        if data.startswith(b"<!--", pos):
            end = data.find(b"-->", pos + 2)  # "-->" may share the dashes of "<!--" ("<!-->")
            if end < 0:
                return None
            pos = end + 3
            continue
        if data[pos:pos + 5].lower() == b"<meta" and pos + 5 < n and data[pos + 5] in b"\t\n\x0c\r /":
            pos += 6
            seen: set[bytes] = set()
            got_pragma = False
            need_pragma: bool | None = None
            charset: str | None = None
            while True:
                name, value, pos = _get_attribute(data, pos)
                if name is None:
                    break
                if name in seen:
                    continue
                seen.add(name)
                text = value.decode("ascii", errors="replace")
                if name == b"http-equiv":
                    if text == "content-type":
                        got_pragma = True
                elif name == b"content":
                    if charset is None:
                        label = encoding_from_meta_content(text)
                        if label is not None:
                            charset = lookup_label(label) or ""
                            need_pragma = True
                elif name == b"charset":
                    charset = lookup_label(text) or ""
                    need_pragma = False
            # "" stands for the standard's "failure" (a label that names no encoding)
            if need_pragma is None or (need_pragma and not got_pragma) or not charset:
                pos += 1
                continue
            if charset in ("utf-16be", "utf-16le"):
                # a document that can be prescanned as ASCII bytes cannot really be UTF-16
                return "utf-8"
            if charset == "x-user-defined":
                return "windows-1252"
            return charset
        if data.startswith(b"<", pos) and pos + 1 < n and (
            _is_alpha(data[pos + 1]) or (data[pos + 1] == 0x2F and pos + 2 < n and _is_alpha(data[pos + 2]))
        ):
            # any other tag: skip its name, then its attributes
            while pos < n and data[pos] not in b"\t\n\x0c\r >":
                pos += 1
            while True:
                name, _, pos = _get_attribute(data, pos)
                if name is None:
                    break
            pos += 1
            continue
        if data[pos:pos + 2] in (b"<!", b"</", b"<?"):
            end = data.find(b">", pos + 2)
            if end < 0:
                return None
            pos = end + 1
            continue
        pos += 1
    return None
