"""How following went for the links a dataset holds: :func:`follow_report` (``linkfold follow-report``),
with what each refusal means for the person who reads it (:func:`linkfold.web.explain_refusal`).

The report counts the canonical URLs a dataset sighted (or any dataset, without one), never the URLs that
chains passed through or ended at and no dataset holds: a lab asks how much of *its* link sample is dead.
The dead share is failed / (resolved + failed) over those; refused URLs were never asked, and URLs not
followed yet are not known either way, so both are counted apart.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from sqlalchemy.engine import Engine

from ..store import evidence as ev
from ..store.datasets import get_dataset
from ..web.refusals import explain_refusal, refusal_class


@dataclass
class FollowReport:
    """What following says about the links of a dataset (or of every dataset)."""

    dataset: str | None
    held: int = 0  # distinct canonical URLs sighted
    resolved: int = 0
    failed: dict[str, int] = field(default_factory=dict)  # by failure class
    refused: dict[str, int] = field(default_factory=dict)  # by class: refused (the guard), robots
    refusals: dict[str | None, int] = field(default_factory=dict)  # by reason key

    @property
    def failed_total(self) -> int:
        return sum(self.failed.values())

    @property
    def refused_total(self) -> int:
        return sum(self.refused.values())

    @property
    def followed(self) -> int:
        return self.resolved + self.failed_total + self.refused_total

    @property
    def not_followed(self) -> int:
        return max(0, self.held - self.followed)

    @property
    def dead_share(self) -> float | None:
        """Failed links as a share of those that answered or failed; None when there are none."""
        asked = self.resolved + self.failed_total
        return self.failed_total / asked if asked else None

    def rows(self) -> list[dict[str, Any]]:
        """One row per state, failure class and refusal reason; their ``urls`` add up to ``held``."""
        out: list[dict[str, Any]] = [{"state": "resolved", "failure": None, "reason": None, "urls": self.resolved}]
        out += [{"state": "failed", "failure": k, "reason": None, "urls": v} for k, v in sorted(self.failed.items())]
        out += [{"state": "refused", "failure": refusal_class(k), "reason": k, "urls": v}
                for k, v in sorted(self.refusals.items(), key=lambda kv: kv[0] or "")]
        out.append({"state": "not_followed", "failure": None, "reason": None, "urls": self.not_followed})
        return out

    def as_dict(self) -> dict[str, Any]:
        return {"dataset": self.dataset, "held": self.held, "followed": self.followed,
                "not_followed": self.not_followed, "resolved": self.resolved,
                "failed": dict(sorted(self.failed.items())), "refused": dict(sorted(self.refused.items())),
                "refusals": {str(k): v for k, v in sorted(self.refusals.items(), key=lambda kv: kv[0] or "")},
                "dead_share": self.dead_share}

    def lines(self) -> list[str]:
        """The summary for people: what was held, the dead share over it, and why URLs were refused."""
        whose = f"dataset {self.dataset!r}" if self.dataset else "all datasets"
        out = [f"{whose}: {self.held:,} links held (distinct canonical URLs), {self.followed:,} followed, "
               f"{self.not_followed:,} not followed"]
        share = self.dead_share
        asked = self.resolved + self.failed_total
        out.append("dead share: " + (f"{100 * share:.1f}% ({self.failed_total:,} of the {asked:,} links that "
                                     "answered or failed)" if share is not None else "n/a (no link answered or "
                                                                                    "failed yet)"))
        if self.refusals:
            out.append(f"refused, never asked ({self.refused_total:,}; not part of the dead share):")
            for reason, n in sorted(self.refusals.items(), key=lambda kv: -kv[1]):
                out.append(f"  {n:,}  {explain_refusal(reason)}")
        return out


def follow_report(engine: Engine, *, dataset: str | None = None) -> FollowReport:
    """Follow outcomes of the links ``dataset`` holds (every dataset's when None); see the module doc."""
    with engine.connect() as conn:
        dataset_id = get_dataset(conn, dataset)["id"] if dataset else None
        totals = ev.follow_totals(conn, dataset_id=dataset_id)
    return FollowReport(dataset=dataset, held=totals["held"], resolved=totals["resolved"],
                        failed=totals.get("failed", {}), refused=totals.get("refused", {}),
                        refusals=totals.get("refusals", {}))


__all__ = ["FollowReport", "follow_report"]
