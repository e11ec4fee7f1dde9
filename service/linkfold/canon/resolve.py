"""RFC 3986 §5.2 reference resolution, for relative Location headers and rel=canonical links.

This is the RFC's algorithm as written (strict: a reference with a scheme is taken as absolute, §5.2.2),
on the component split of RFC 3986 Appendix B. It resolves; it does not normalise: the result goes through
:func:`linkfold.canon.canonicalize` like any other raw URL.
"""

from __future__ import annotations

import re

from ..errors import InvalidURL

# RFC 3986 Appendix B: the regular expression that splits any URI reference into its five components.
_SPLIT = re.compile(r"^(?:([^:/?#]+):)?(?://([^/?#]*))?([^?#]*)(?:\?([^#]*))?(?:#(.*))?$", re.DOTALL)


def _split(ref: str) -> tuple[str | None, str | None, str, str | None, str | None]:
    m = _SPLIT.match(ref)
    assert m is not None  # every string matches Appendix B's expression
    return m.group(1), m.group(2), m.group(3), m.group(4), m.group(5)


def remove_dot_segments(path: str) -> str:
    """RFC 3986 §5.2.4, step by step."""
    inp = path
    out: list[str] = []
    while inp:
        if inp.startswith("../"):
            inp = inp[3:]
        elif inp.startswith(("./", "/./")):
            inp = inp[2:]
        elif inp == "/.":
            inp = "/"
        elif inp.startswith("/../"):
            inp = inp[3:]
            if out:
                out.pop()
        elif inp == "/..":
            inp = "/"
            if out:
                out.pop()
        elif inp in (".", ".."):
            inp = ""
        else:
            start = 1 if inp.startswith("/") else 0
            end = inp.find("/", start)
            if end == -1:
                end = len(inp)
            out.append(inp[:end])
            inp = inp[end:]
    return "".join(out)


def _merge(base_authority: str | None, base_path: str, ref_path: str) -> str:
    """RFC 3986 §5.2.3."""
    if base_authority is not None and base_path == "":
        return "/" + ref_path
    cut = base_path.rfind("/")
    return base_path[: cut + 1] + ref_path if cut >= 0 else ref_path


def _recompose(scheme: str | None, authority: str | None, path: str, query: str | None,
               fragment: str | None) -> str:
    """RFC 3986 §5.3."""
    out = []
    if scheme is not None:
        out.append(scheme + ":")
    if authority is not None:
        out.append("//" + authority)
    out.append(path)
    if query is not None:
        out.append("?" + query)
    if fragment is not None:
        out.append("#" + fragment)
    return "".join(out)


def resolve_reference(base: str, ref: str) -> str:
    """Resolve ``ref`` against the absolute URI ``base`` (RFC 3986 §5.2.2, strict).

    Raises InvalidURL("not_absolute") when ``base`` has no scheme; leading and trailing whitespace of
    either is ignored (a header value or an attribute may carry some).
    """
    if not isinstance(base, str) or not isinstance(ref, str):
        raise InvalidURL("not_text", "base and reference must be text")
    base = base.strip()
    ref = ref.strip()
    b_scheme, b_auth, b_path, b_query, _ = _split(base)
    if b_scheme is None:
        raise InvalidURL("not_absolute", f"base {base[:80]!r} has no scheme")
    r_scheme, r_auth, r_path, r_query, r_frag = _split(ref)
    if r_scheme is not None:
        return _recompose(r_scheme, r_auth, remove_dot_segments(r_path), r_query, r_frag)
    if r_auth is not None:
        return _recompose(b_scheme, r_auth, remove_dot_segments(r_path), r_query, r_frag)
    if r_path == "":
        return _recompose(b_scheme, b_auth, b_path, r_query if r_query is not None else b_query, r_frag)
    if r_path.startswith("/"):
        path = remove_dot_segments(r_path)
    else:
        path = remove_dot_segments(_merge(b_auth, b_path, r_path))
    return _recompose(b_scheme, b_auth, path, r_query, r_frag)
