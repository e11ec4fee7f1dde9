"""Outlet list files: parsing, versions, the no-op reload, conflicts with the rules file, bad input.

Every refused load is checked to leave the stored lists exactly as they were.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import sqlalchemy as sa

from linkfold.canon import load_rules, parse_rules
from linkfold.errors import InputError, OutletListError
from linkfold.outlets import (
    list_in_force,
    list_outlet_lists,
    load_outlet_list,
    outlet_attributes,
    parse_outlet_list,
)
from linkfold.store import tables as t
from linkfold.store.rulesets import store_ruleset

RULES = Path(__file__).parent.parent / "service" / "linkfold" / "demo_data" / "rules" / "demo.toml"

GOOD = """domain,outlet,type,reach,coding
northvale-herald.example,Northvale Herald,regional daily,120000,A3
www.eastbrook.example,Eastbrook Gazette,weekly,007,B1
eastbrook-radio.test,Eastbrook Gazette,,,
"""


def write(tmp_path: Path, text: str | bytes, name: str = "outlets.csv") -> Path:
    path = tmp_path / name
    path.write_bytes(text.encode() if isinstance(text, str) else text)
    return path


def stored(engine: sa.Engine) -> tuple[list, list]:
    with engine.connect() as conn:
        return (conn.execute(sa.select(t.outlet_lists).order_by(t.outlet_lists.c.id)).all(),
                conn.execute(sa.select(t.outlet_entries).order_by(t.outlet_entries.c.id)).all())


def with_rules(engine: sa.Engine) -> None:
    with engine.begin() as conn:
        store_ruleset(conn, load_rules(RULES))


# --- parsing (pure) -------------------------------------------------------------------------------------
def test_parse_folds_hosts_like_urls_and_types_plain_numbers() -> None:
    parsed = parse_outlet_list(GOOD.encode(), source="o.csv", rules=load_rules(RULES))
    assert [e.match for e in parsed.entries] == ["northvale-herald.example", "eastbrook.example",
                                                 "eastbrook-radio.test"]
    assert parsed.columns == ("type", "reach", "coding")
    # "007" is a code (a leading zero), 120000 a number.
    assert parsed.outlets["Eastbrook Gazette"] == {"type": "weekly", "reach": "007", "coding": "B1"}
    assert parsed.outlets["Northvale Herald"]["reach"] == 120000


def test_host_header_and_non_ascii_hosts() -> None:
    # UTS #46 / IDNA: a U-label is stored as its A-label, as URL hosts are.
    parsed = parse_outlet_list("Host,Outlet\nbücher.example,Bücher Blatt\n".encode(), source="o.csv")
    assert parsed.entries[0].match == "xn--bcher-kva.example"
    assert parsed.columns == ()


@pytest.mark.parametrize(("text", "line", "reason"), [
    ("", 1, "empty file"),
    ("site,outlet\na.example,A\n", 1, "missing column 'domain'"),
    ("domain,name\na.example,A\n", 1, "missing column 'outlet'"),
    ("domain,host,outlet\na.example,a.example,A\n", 1, "not both"),
    ("domain,outlet,type,type\na.example,A,x,y\n", 1, "appears twice"),
    ("domain,outlet,sightings\na.example,A,3\n", 1, "outlets table uses"),
    ("domain,outlet\na.example,A\nb.example,\n", 3, "empty outlet name"),
    ("domain,outlet\na.example,A\n,B\n", 3, "empty domain"),
    ("domain,outlet\nhttps://a.example/news,A\n", 2, "not a domain"),
    ("domain,outlet\na.example:8080,A\n", 2, "not a domain"),
    ("domain,outlet\n192.0.2.7,A\n", 2, "not a domain"),
    ("domain,outlet\nexample,A\n", 2, "not a domain"),
    ("domain,outlet\nco.uk,A\n", 2, "not a domain"),
    ("domain,outlet\na.example,A\nb.example,B\nA.Example,C\n", 4, "duplicate domain 'a.example': already on line 2"),
    ("domain,outlet\na.example,A\nwww.a.example,A\n", 3, "duplicate domain"),
    ("domain,outlet,type\na.example,A\n", 2, "2 cells, the header has 3"),
    ("domain,outlet,type\na.example,A,daily\nb.example,A,weekly\n", 3, "has type = 'weekly' here and 'daily' on line 2"),
    ('domain,outlet\n"a.example,A\n', 2, "not valid CSV"),
])
def test_bad_input_names_line_and_reason(text: str, line: int, reason: str) -> None:
    with pytest.raises(OutletListError) as err:
        parse_outlet_list(text.encode(), source="lists/o.csv")
    assert err.value.line == line
    assert reason in str(err.value)
    assert str(err.value).startswith(f"lists/o.csv:{line}: ")


def test_not_utf8_names_the_line() -> None:
    with pytest.raises(OutletListError) as err:
        parse_outlet_list(b"domain,outlet\na.example,A\nb.example,Caf\xe9\n", source="o.csv")
    assert err.value.line == 3 and "not UTF-8" in str(err.value)


def test_every_problem_is_reported() -> None:
    with pytest.raises(OutletListError) as err:
        parse_outlet_list(b"domain,outlet\na.example,\nb/c,B\nd.example,D\nd.example,D\n", source="o.csv")
    assert [line for line, _ in err.value.problems] == [2, 3, 5]
    assert "2 more problems" in str(err.value)


def test_conflicts_with_the_rules_file() -> None:
    from linkfold.outlets import rule_conflicts

    rules = parse_rules("""
[site."big.example"]
outlet = "Big"
[site."sport.big.example"]
outlet = "Big Sport"
[site."northvale-herald.example"]
outlet = "Northvale Herald"
aliases = ["herald-archive.test"]
""", source="r.toml")
    text = ("domain,outlet\n"
            "big.example,Big Group\n"            # the site itself, and the sport site under it
            "herald-archive.test,Archive\n"      # an alias folds onto its site: the site's name applies
            "plain.example,Plain\n")
    parsed = parse_outlet_list(text.encode(), source="o.csv", rules=rules)
    assert parsed.entries[1].match == "northvale-herald.example"
    found = {(c.line_no, c.rules, c.under) for c in rule_conflicts(parsed.entries, rules)}
    assert found == {(2, "Big", False), (2, "Big Sport", True), (3, "Northvale Herald", False)}
    # A line for the alias and one for its site are one host twice.
    with pytest.raises(OutletListError, match=r"3: duplicate domain 'northvale-herald\.example'"):
        parse_outlet_list(b"domain,outlet\nnorthvale-herald.example,N\nherald-archive.test,N\n", source="o.csv",
                          rules=rules)


# --- storing (both backends) ----------------------------------------------------------------------------
def test_versions_and_noop_reload(engine: sa.Engine, tmp_path: Path) -> None:
    path = write(tmp_path, GOOD)
    first = load_outlet_list(engine, path)
    assert first.created and first.version == first.in_force and first.outlets == 2 and first.entries == 3
    again = load_outlet_list(engine, path)
    assert not again.created and again.version == first.version
    assert len(stored(engine)[0]) == 1

    second = load_outlet_list(engine, write(tmp_path, GOOD + "lakeside-wire.example,Lakeside Wire,wire,,\n", "v2.csv"))
    assert second.created and second.version > first.version
    # The old content loaded again is still the old version; the newest stays in force.
    back = load_outlet_list(engine, path)
    assert not back.created and back.version == first.version and back.in_force == second.version
    with engine.connect() as conn:
        assert list_in_force(conn) == second.version
        attrs = outlet_attributes(conn)
        assert attrs["Lakeside Wire"] == {"type": "wire", "reach": None, "coding": None}
        assert attrs["Eastbrook Gazette"] == {"type": "weekly", "reach": "007", "coding": "B1"}
        assert outlet_attributes(conn, first.version).keys() == {"Northvale Herald", "Eastbrook Gazette"}
        versions = list_outlet_lists(conn)
    assert [(v["version"], v["entries"], v["in_force"]) for v in versions] == [
        (first.version, 3, False), (second.version, 4, True)]


def test_no_list_gives_no_attributes(engine: sa.Engine) -> None:
    with engine.connect() as conn:
        assert outlet_attributes(conn) == {} and list_in_force(conn) is None


def test_refused_loads_store_nothing(engine: sa.Engine, tmp_path: Path) -> None:
    load_outlet_list(engine, write(tmp_path, GOOD))
    before = stored(engine)
    for i, bad in enumerate(["domain,outlet\na.example,A\na.example,B\n", "domain\na.example\n",
                             "domain,outlet\nriverton-daily.test,Riverton Times\n"]):
        with_rules(engine)
        with pytest.raises(OutletListError):
            load_outlet_list(engine, write(tmp_path, bad, f"bad{i}.csv"))
        assert stored(engine) == before
    with pytest.raises(InputError, match="cannot read"):
        load_outlet_list(engine, tmp_path / "missing.csv")


def test_conflict_is_reported_with_file_and_line_and_prefer_decides(engine: sa.Engine, tmp_path: Path) -> None:
    with_rules(engine)
    path = write(tmp_path, "domain,outlet,type\n"
                           "lakeside-wire.example,Lakeside Wire,wire\n"
                           "riverton-daily.test,Riverton Times,daily\n")
    with pytest.raises(OutletListError) as err:
        load_outlet_list(engine, path)
    assert str(err.value).startswith(f"{path}:3: 'riverton-daily.test' is outlet 'Riverton Daily' in the ruleset")
    assert "--prefer" in str(err.value)
    assert stored(engine) == ([], [])

    by_list = load_outlet_list(engine, path, prefer="list")
    with engine.connect() as conn:
        assert "Riverton Times" in outlet_attributes(conn)
    by_rules = load_outlet_list(engine, path, prefer="rules")
    assert by_rules.created and by_rules.version != by_list.version
    with engine.connect() as conn:
        attrs = outlet_attributes(conn)
    assert "Riverton Times" not in attrs and attrs["Riverton Daily"] == {"type": "daily"}
    # Each choice is its own version; loading either again is a no-op.
    assert not load_outlet_list(engine, path, prefer="list").created


def test_check_only_writes_nothing(engine: sa.Engine, tmp_path: Path) -> None:
    result = load_outlet_list(engine, write(tmp_path, GOOD), check_only=True)
    assert result.checked_only and not result.created and result.entries == 3
    assert stored(engine) == ([], [])
