"""Optional preparation of corpus texts for topic models, done once: tokens, lower case, stop words per
language, n-grams. Pure: no database, no network; the raw text is never changed (the corpus keeps it
beside what this adds).

* **tokens**: maximal runs of Unicode letters and digits, with an apostrophe or hyphen inside a word kept
  (``don't``, ``well-known``); punctuation, symbols and white space separate tokens. Common practice for
  bag-of-words models, not a standard (UAX #29 word boundaries differ for some scripts, e.g. ones written
  without spaces);
* **lower case**: :meth:`str.lower` of each token;
* **stop words**: the list for the document's language (the primary subtag of its BCP 47 tag, ``en-GB``
  → ``en``) from the ``stop-words`` package on PyPI, which ships its lists as package data (33
  languages, nothing is downloaded at run time); compared case-insensitively; a language without a list
  keeps every token and is counted;
* **n-grams**: the 2- … N-grams of the tokens that remain (after stop words are dropped), joined by
  ``_``, in text order, in a field of their own.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

_TOKEN = re.compile(r"[^\W_]+(?:['’\-][^\W_]+)*")
#: The longest n-grams added beside a text (``ngrams`` runs from 1, none, to this).
MAX_NGRAM = 5


@dataclass(frozen=True)
class Preparation:
    """What to add beside each text. Any of ``lowercase``, ``stop_words`` or ``ngrams`` ≥ 2 implies tokens."""

    tokens: bool = False
    lowercase: bool = False
    stop_words: bool = False
    ngrams: int = 1

    def __post_init__(self) -> None:
        if not 1 <= self.ngrams <= MAX_NGRAM:
            raise ValueError(f"n-grams go from 1 (none) to {MAX_NGRAM}, not {self.ngrams}")

    @property
    def active(self) -> bool:
        return self.tokens or self.lowercase or self.stop_words or self.ngrams > 1

    def fields(self) -> list[str]:
        """The fields a record gains."""
        if not self.active:
            return []
        return ["tokens"] + (["stop_word_list"] if self.stop_words else []) + (["ngrams"] if self.ngrams > 1 else [])


#: No preparation: the raw text only.
RAW = Preparation()


def tokens_of(text: str) -> list[str]:
    """The tokens of ``text`` (module docstring)."""
    return _TOKEN.findall(text)


def language_code(tag: str | None) -> str | None:
    """The primary language subtag of a BCP 47 tag, lower case (``pt-BR`` → ``pt``)."""
    if not tag:
        return None
    code = tag.strip().replace("_", "-").split("-", 1)[0].lower()
    return code or None


@lru_cache(maxsize=64)
def stop_word_set(code: str) -> frozenset[str] | None:
    """The stop words of a language (ISO 639-1 code) from the ``stop-words`` package; None without a list."""
    from stop_words import LANGUAGE_MAPPING, get_stop_words

    if code not in LANGUAGE_MAPPING:
        return None
    return frozenset(w.lower() for w in get_stop_words(code))


def ngrams_of(tokens: list[str], n: int) -> list[str]:
    """Every 2- … n-gram of ``tokens`` joined by ``_``: all bigrams first, then trigrams …"""
    out: list[str] = []
    for size in range(2, n + 1):
        out.extend("_".join(tokens[i:i + size]) for i in range(len(tokens) - size + 1))
    return out


def prepare(text: str, language: str | None, how: Preparation) -> dict[str, Any]:
    """The fields :meth:`Preparation.fields` names, for one text."""
    if not how.active:
        return {}
    toks = tokens_of(text)
    if how.lowercase:
        toks = [w.lower() for w in toks]
    out: dict[str, Any] = {}
    if how.stop_words:
        code = language_code(language)
        words = stop_word_set(code) if code else None
        if words is not None:
            toks = [w for w in toks if w.lower() not in words]
        out["stop_word_list"] = code if words is not None else None
    out["tokens"] = toks
    if how.ngrams > 1:
        out["ngrams"] = ngrams_of(toks, how.ngrams)
    return {k: out[k] for k in how.fields()}


__all__ = ["MAX_NGRAM", "RAW", "Preparation", "language_code", "ngrams_of", "prepare", "stop_word_set", "tokens_of"]
