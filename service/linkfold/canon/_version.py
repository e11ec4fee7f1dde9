"""Versions that are part of every ruleset's identity."""

from __future__ import annotations

import publicsuffixlist

#: Bump whenever a change to the canonicaliser can change its output for some input. It is hashed into
#: every ruleset digest, so canonical URLs made by different algorithms are never mistaken for each other.
CANON_VERSION = "2"

#: The Public Suffix List in use: the package ships the list, and its version carries the list's date.
PSL_VERSION: str = str(publicsuffixlist.__version__)
