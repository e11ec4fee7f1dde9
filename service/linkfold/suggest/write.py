"""The suggestions as a rules file: the ruleset in force, kept as it is, with every proposal added in place
and its evidence in a comment beside it. ``linkfold rules check`` accepts the result and ``linkfold rules
add`` stores it as the next version (the file is checked by the same parser before it is written).

The lab's comments and layout are not carried over (the stored text is parsed and written again); its
rules all are, in the order the lab wrote them.
"""

from __future__ import annotations

import json
import re
import tomllib
from pathlib import Path
from typing import Any

from .._tabular import atomic_path
from ..canon import default_rules, parse_rules
from ..canon.rules import normalise_rule_host
from ..errors import InputError
from .evidence import shown_url
from .learn import SiteSuggestion, Suggestions
from .params import ParamVerdict
from .templates import Proposal

#: The first line of every file written here; an existing file without it is never overwritten.
MARK = "# Site rules proposed by `linkfold rules suggest`"
_LITERAL_OK = re.compile(r"^[^'\x00-\x1f\x7f]*$")
_HOST_LISTS = ("shortener_hosts", "never_follow_hosts", "never_article_hosts")
_LISTED = 50


def toml_string(text: str) -> str:
    # A literal string keeps regular expressions readable (no doubled backslashes); JSON's escapes are all
    # valid TOML basic-string escapes for everything else (TOML 1.0, "String").
    return f"'{text}'" if _LITERAL_OK.match(text) else json.dumps(text, ensure_ascii=False)


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return toml_string(v)
    if isinstance(v, int | float):
        return str(v)
    if isinstance(v, list) and all(isinstance(i, str | bool | int) for i in v):
        return "[" + ", ".join(_value(i) for i in v) + "]"
    raise TypeError(f"cannot write {type(v).__name__} in a rules file")


def _array(key: str, items: list[tuple[str, str]]) -> list[str]:
    """A multi-line array, each item with its comment (TOML allows comments between elements)."""
    if not items:
        return []
    out = [f"{key} = ["]
    for text, comment in items:
        out.append(f"  {toml_string(text)},{'  # ' + comment if comment else ''}")
    out.append("]")
    return out


def lab_data(s: Suggestions) -> dict[str, Any]:
    """The lab's own rules in force (not the defaults they are laid over)."""
    if s.base.digest == default_rules().digest:
        return {}
    return tomllib.loads(s.base.source)


def _share(part: int, whole: int) -> str:
    return f"{part / whole:.3f}" if whole else "n/a"


def _pattern_comment(p: Proposal) -> str:
    st = p.stats
    return (f"proposed: {p.text} — {st.positive:,} URLs with usable text, {st.negative:,} pages without "
            f"(precision {_share(st.positive, st.labelled)}), {st.unknown:,} not fetched; covers "
            f"{p.coverage:.3f} of the site's usable texts")


def _param_comment(v: ParamVerdict) -> str:
    e = v.evidence
    if v.action == "drop":
        return (f"proposed: {e.support:,} URL pairs differ only in it and hold the same text; 0 counter-examples; "
                f"on {e.urls:,} URLs with text")
    return f"proposed: {e.counter:,} URL pairs differ only in it and hold different texts ({e.support:,} the same)"


def render(s: Suggestions) -> str:
    """The rules file text (see the module doc), checked with the rules parser before it is returned."""
    lab = lab_data(s)
    base = s.base
    lines = [MARK, "# from the evidence stored in the registry. Every rule of the ruleset in force is kept below as",
             f"# it was (version {s.base_version if s.base_version is not None else '— none stored, the defaults'}"
             f", digest {base.digest[:12]}); each proposal is marked \"proposed\" with its evidence.",
             "# Review, delete what you do not want, then:",
             "#   linkfold rules check FILE && linkfold rules load FILE && linkfold recanonicalize",
             f"# Minimum support: {s.min_support}. Counts are stored canonical URLs; \"usable text\" is an extracted",
             "# article text; \"pages without\" are stored pages that held none (empty, too short, not HTML, video).",
             f"# Scope: {'outlet ' + s.outlet if s.outlet else 'every outlet'}; {s.urls:,} URLs read."]
    thin = s.thin
    for key, reason in thin[:_LISTED]:
        lines.append(f"# too little evidence for an article pattern: {key} — {reason}")
    if len(thin) > _LISTED:
        lines.append(f"#   … and {len(thin) - _LISTED} more sites (each section below says why)")
    for site in sorted(s.sites.values(), key=lambda x: x.key):
        for pattern, neg, pos in site.doubtful:
            lines.append(f"# doubtful: the pattern in force '{pattern}' of {site.key} matches {neg:,} stored pages "
                         f"without article text (and {pos:,} with)")
    if s.sinks:
        lines.append("# Sinks (redirect or canonical targets the dedupe stage keeps apart), largest fan-in first:")
        for sink in s.sinks[:20]:
            lines.append(f"#   {shown_url(sink.host, sink.url)}: {sink.kind.value}, fan-in {sink.fan_in:,}, "
                         f"{sink.sources:,} sources")
        if len(s.sinks) > 20:
            lines.append(f"#   … {len(s.sinks) - 20} more (linkfold follow-report --sinks)")
    lines.append("")
    lines.append(f"name = {toml_string(lab.get('name', base.name if lab else 'suggested rules'))}")
    proposed = {"shortener_hosts": [(p.host, f"proposed: {p.counts.off_domain:,} of {p.counts.followed:,} "
                                     f"followed URLs led to another registered domain "
                                     f"({_share(p.counts.off_domain, p.counts.followed)}); no usable text")
                                    for p in s.shorteners],
                "never_article_hosts": [(p.host, f"proposed: {p.counts.documents:,} URLs with a stored document, "
                                         f"none with usable text" + (f"; {p.sinks} sink targets" if p.sinks else ""))
                                        for p in s.never_article],
                "never_follow_hosts": []}
    for key in _HOST_LISTS:
        items = [(h, "in force") for h in lab.get(key, [])]
        items += [(h, c) for h, c in proposed[key] if h not in lab.get(key, [])]
        lines += _array(key, items)
    for key, value in lab.items():
        if key in ("name", "site", "redirect_wrapper", *_HOST_LISTS):
            continue
        lines += ["", f"[{key}]"] + [f"{k} = {_value(v)}" for k, v in value.items()]
    for wrapper in lab.get("redirect_wrapper", []):
        lines += ["", "[[redirect_wrapper]]"] + [f"{k} = {_value(v)}" for k, v in wrapper.items()]
    lab_sites = lab.get("site", {})
    written = set()
    for raw_host, body in lab_sites.items():
        host = normalise_rule_host(raw_host) or raw_host
        written.add(host)
        lines += _site(host, body, s.sites.get(host))
    for key in sorted(s.sites):
        site = s.sites[key]
        if key not in written and site.has_proposal():
            lines += _site(key, {}, site)
    text = "\n".join(lines) + "\n"
    parse_rules(text, source="<suggested rules>")  # a bug here must never reach a lab's file
    return text


def _site(host: str, body: dict[str, Any], site: SiteSuggestion | None) -> list[str]:
    out = ["", f"[site.{json.dumps(host)}]"]
    if not body and site is not None:
        t = site.learned.totals
        out.append(f"# proposed: a new section ({t.positive:,} URLs with usable text, {t.negative:,} pages without, "
                   f"{t.unknown:,} not fetched)")
    for key, value in body.items():
        if key not in ("aliases", "keep_params", "drop_params", "article", "rewrite"):
            out.append(f"{key} = {_value(value)}")
    aliases = [(a, "in force") for a in body.get("aliases", [])]
    keeps = [(p, "in force") for p in body.get("keep_params", [])]
    drops = [(p, "in force") for p in body.get("drop_params", [])]
    article = [(p, "in force") for p in body.get("article", [])]
    if site is not None:
        aliases += [(a.alias, f"proposed: moved here; {a.same_path:,} of its followed URLs redirected to the same "
                              f"path on this site, {a.other_path:,} elsewhere" if a.moved else
                              f"proposed: {a.same_path:,} paths hold the same text on both hosts, "
                              f"{a.conflicting} a different one; {a.other_path:,} shared texts at other paths")
                    for a in site.aliases]
        keeps += [(v.name, _param_comment(v)) for v in site.keeps]
        drops += [(v.name, _param_comment(v)) for v in site.drops]
        article += [(p.regex, _pattern_comment(p)) for p in site.patterns]
        if site.learned.thin and not site.patterns:
            out.append(f"# no article pattern proposed: {site.learned.thin}")
        for p in site.covered:
            out.append(f"# already covered by a pattern in force: {p.text} ({p.stats.positive:,} URLs with usable text)")
    for key, items in (("aliases", aliases), ("keep_params", keeps), ("drop_params", drops), ("article", article)):
        out += _array(key, items)
    for rewrite in body.get("rewrite", []):
        out += ["", f"[[site.{json.dumps(host)}.rewrite]]"] + [f"{k} = {_value(v)}" for k, v in rewrite.items()]
    return out


def save(text: str, out: Path) -> None:
    """Write the suggestions to ``out`` (atomically); never over a file this command did not write."""
    out = out.expanduser()
    if out.exists():
        try:
            with out.open(encoding="utf-8") as fh:
                first = fh.readline().rstrip("\n")
        except (OSError, UnicodeDecodeError):
            first = ""
        if first != MARK:
            raise InputError(f"{out}: exists and was not written by `linkfold rules suggest`; choose another "
                             "file name (a lab's own rules file is never overwritten)")
    with atomic_path(out) as tmp:
        tmp.write_text(text, encoding="utf-8")


__all__ = ["MARK", "lab_data", "render", "save", "toml_string"]
