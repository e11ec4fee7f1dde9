"""When extracted text counts as an article, and why a page that yields none is marked unusable.

The rules are data (:class:`UsableTextRules`) with documented defaults. None of the thresholds or marker
lists comes from a standard except schema.org's ``isAccessibleForFree``; they are common practice in news
text pipelines, tuned on the invented fixture pages, and a lab may pass its own.

Order of the decision (the first that applies wins):

1. ``not_html`` / ``empty`` / ``broken`` — decided before any text exists (see ``extract``).
2. Text of at least ``short_words`` words is ``usable`` whatever the page's signals: a metered paywall
   or a cookie banner around a full article does not hide the article.
3. Below that, a page with paywall signals is ``paywall``: schema.org ``isAccessibleForFree: false``,
   an element whose class or id names a paywall, or two or more paywall phrases in the page's text.
4. Then ``consent_wall``: two or more consent phrases in the *extracted* text (the wall is what was
   extracted), or an element whose class or id names a consent wall while the text is under ``min_words``.
5. Then ``video``: Open Graph ``og:type`` ``video.*`` or a schema.org VideoObject as the main node.
6. Then ``empty`` (no words at all) or ``too_short`` (under ``min_words``); else ``usable``.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum
from typing import Any


class Status(StrEnum):
    USABLE = "usable"
    NO_TEXT = "no_text"


class Unusable(StrEnum):
    """Why a page yields no usable text (stored with the document; stable names)."""

    NOT_HTML = "not_html"
    EMPTY = "empty"
    BROKEN = "broken"
    TOO_SHORT = "too_short"
    PAYWALL = "paywall"
    CONSENT_WALL = "consent_wall"
    VIDEO = "video"


@dataclass(frozen=True)
class UsableTextRules:
    """Thresholds and markers of the usable-text decision (module docstring has the order)."""

    #: Fewer words than this is too short for a news article (common practice: a news brief runs to
    #: 50–100 words; shorter text is a teaser, a caption or a stub).
    min_words: int = 50
    #: Below this many words, paywall, consent and video signals are believed; above it, the text wins.
    short_words: int = 150
    paywall_markers: tuple[str, ...] = ("paywall", "regwall", "meter-wall", "subscriber-only",
                                        "subscription-wall", "premium-wall")
    paywall_phrases: tuple[str, ...] = ("subscribe to continue", "to continue reading", "for subscribers",
                                        "subscribers only", "already a subscriber", "subscribe now",
                                        "sign in to read", "unlock this article")
    consent_markers: tuple[str, ...] = ("consent-wall", "cookie-wall", "cmp-overlay", "consent-required")
    consent_phrases: tuple[str, ...] = ("cookies", "consent", "accept all", "reject all", "manage options",
                                        "before you continue", "privacy settings", "our partners")

    def __post_init__(self) -> None:
        if self.min_words < 0 or self.short_words < self.min_words:
            raise ValueError("need 0 <= min_words <= short_words")


DEFAULT_RULES = UsableTextRules()


def _phrases(text: str, phrases: tuple[str, ...]) -> int:
    low = text.lower()
    return sum(1 for p in phrases if p in low)


def _has_marker(tree: Any, markers: tuple[str, ...]) -> bool:
    for el in tree.iter():
        if not isinstance(el.tag, str):
            continue  # comments and processing instructions
        names = f"{el.get('class') or ''} {el.get('id') or ''}".lower()
        if names.strip() and any(m in names for m in markers):
            return True
    return False


def classify(*, text: str, word_count: int, tree: Any, not_free: bool, video: bool,
             rules: UsableTextRules = DEFAULT_RULES) -> Unusable | None:
    """None when the text is usable, else the reason it is not (steps 2–6 of the module docstring)."""
    if word_count >= rules.short_words:
        return None
    # Without a tree (documents loaded from a file) only the text itself can show a wall.
    page_text = tree.text_content() if tree is not None else text
    paywall_marked = tree is not None and _has_marker(tree, rules.paywall_markers)
    if not_free or paywall_marked or _phrases(page_text, rules.paywall_phrases) >= 2:
        return Unusable.PAYWALL
    consent_marked = tree is not None and _has_marker(tree, rules.consent_markers)
    if _phrases(text, rules.consent_phrases) >= 2 or (word_count < rules.min_words and consent_marked):
        return Unusable.CONSENT_WALL
    if video:
        return Unusable.VIDEO
    if word_count == 0:
        return Unusable.EMPTY
    if word_count < rules.min_words:
        return Unusable.TOO_SHORT
    return None
