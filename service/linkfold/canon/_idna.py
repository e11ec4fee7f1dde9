"""``xn--`` labels: the check the WHATWG parser leaves out.

The parser maps Unicode host labels to ASCII (UTS #46 ToASCII), but a label that already *is* ASCII passes
through untouched, so ``https://xn--a/`` and ``https://xn--Bcher-kva.example/`` parse although neither
label is the encoding of any valid Unicode label. UTS #46 §4 (Processing, step 4) says what a label that
starts with ``xn--`` must be: its rest decodes as Punycode (RFC 3492); the decoded label is not empty and
not all ASCII (added in Unicode 15.1); and it meets the validity criteria of §4.1 with nontransitional
processing. We check the last part by a round trip: the decoded label, put through the parser's own
ToASCII, must give back exactly the label we started from. A label with a character UTS #46 maps (upper
case, compatibility forms), one not in NFC, a disallowed code point, or anything the parser's Bidi and
joiner checks refuse comes back different or not at all.
"""

from __future__ import annotations

from functools import lru_cache

from . import _parse  # the parser's ToASCII is the reference for the round trip

# RFC 3492 §5: the parameter values for Punycode.
_BASE, _TMIN, _TMAX, _SKEW, _DAMP = 36, 1, 26, 38, 700
_INITIAL_BIAS, _INITIAL_N = 72, 0x80
_MAX_CODE_POINT = 0x10FFFF
# Characters that would end or split a host if a decoded label held them: such a label is never valid
# (UTS #46 disallows them) and must not reach the parser as part of a URL.
_NOT_IN_HOST = frozenset("/?#@\\:[]% .\u3002\uff0e\uff61")


def _adapt(delta: int, numpoints: int, first: bool) -> int:
    """RFC 3492 §6.1, bias adaptation."""
    delta = delta // _DAMP if first else delta // 2
    delta += delta // numpoints
    k = 0
    while delta > ((_BASE - _TMIN) * _TMAX) // 2:
        delta //= _BASE - _TMIN
        k += _BASE
    return k + ((_BASE - _TMIN + 1) * delta) // (delta + _SKEW)


def _digit(ch: str) -> int:
    """RFC 3492 §5: a-z (either case) are 0-25, 0-9 are 26-35; anything else is not a digit (-1)."""
    o = ord(ch)
    if 0x61 <= o <= 0x7A:
        return o - 0x61
    if 0x41 <= o <= 0x5A:
        return o - 0x41
    if 0x30 <= o <= 0x39:
        return o - 0x30 + 26
    return -1


def punycode_decode(text: str) -> str | None:
    """RFC 3492 §6.2, the decoding procedure; None where the procedure fails (bad input or overflow).

    Overflow (§6.4) cannot happen with Python's integers; a code point past U+10FFFF or a surrogate is a
    failure instead, as no such code point can be a character of a label.
    """
    n, i, bias = _INITIAL_N, 0, _INITIAL_BIAS
    b = text.rfind("-")
    if b > 0:
        basic = text[:b]
        if any(ord(ch) >= 0x80 for ch in basic):
            return None
        output = list(basic)
        pos = b + 1
    else:
        output, pos = [], 0
    while pos < len(text):
        old_i, w, k = i, 1, _BASE
        while True:
            if pos >= len(text):
                return None
            digit = _digit(text[pos])
            pos += 1
            if digit < 0:
                return None
            i += digit * w
            t = _TMIN if k <= bias else _TMAX if k >= bias + _TMAX else k - bias
            if digit < t:
                break
            w *= _BASE - t
            k += _BASE
            if w > _MAX_CODE_POINT * 64 * (len(text) + 1):  # far past any code point: stop early
                return None
        size = len(output) + 1
        bias = _adapt(i - old_i, size, old_i == 0)
        n += i // size
        i %= size
        if n > _MAX_CODE_POINT or 0xD800 <= n <= 0xDFFF:
            return None
        output.insert(i, chr(n))
        i += 1
    return "".join(output)


@lru_cache(maxsize=4096)
def xn_label_problem(label: str) -> str | None:
    """Why an ASCII host label that starts with ``xn--`` is not a valid A-label, or None (UTS #46 §4)."""
    rest = label[4:]
    if not rest:
        return f"label {label!r} is 'xn--' with nothing after it"
    decoded = punycode_decode(rest)
    if decoded is None:
        return f"label {label!r} is not valid Punycode (RFC 3492)"
    if not decoded or all(ord(ch) < 0x80 for ch in decoded):
        return f"label {label!r} decodes to an all-ASCII label (UTS #46 §4, step 4)"
    if any(ch in _NOT_IN_HOST or ord(ch) < 0x21 or 0x7F <= ord(ch) <= 0x9F for ch in decoded):
        return f"label {label!r} decodes to a label with a character no host may hold"
    parts = _parse.parse_with_ada(f"http://{decoded}/")
    if parts is None or parts.host != label or parts.path != "/":
        return f"label {label!r} does not round-trip through UTS #46 ToASCII (an invalid U-label)"
    return None
