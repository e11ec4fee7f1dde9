"""Canonicalisation of a batch of raw URLs as one pure task, for the executor.

A worker gets the ruleset and the raw URLs by value and returns, per URL, either its canonical form or the
refusal's reason code: exactly what :func:`~linkfold.canon.canonicalize` gives in the coordinating process.
"""

from __future__ import annotations

from collections.abc import Sequence

from ..errors import InvalidURL
from .core import Canonical, Canonicaliser
from .rules import Ruleset

#: one URL's outcome: its canonical form, or the reason code and detail of its refusal
Outcome = Canonical | tuple[str, str]


def canonicalize_batch(job: tuple[Ruleset | None, Sequence[str]]) -> list[Outcome]:
    """``(ruleset, raw URLs)`` → one outcome per URL, in order (a refusal as ``(reason, detail)``)."""
    rules, raws = job
    canon = Canonicaliser(rules, cache_size=max(1024, len(raws)))
    out: list[Outcome] = []
    for raw in raws:
        try:
            out.append(canon(raw))
        except InvalidURL as exc:
            out.append((exc.reason, exc.detail or ""))
    return out
