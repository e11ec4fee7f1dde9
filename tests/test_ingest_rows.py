"""Batch.add's inline cases for the usual key and time give what the general rules (_key, parse_time) give;
Batch.add_block stages a block's rows as Batch.add stages the same rows one by one.

Behaviour tests without a database: keys and times drawn at random, including the awkward ones (blank,
NUL, lone surrogates, non-ASCII, offsets other than Z, impossible dates), and each row's staged key,
time and rejects compared with the general functions' answers.
"""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from linkfold.canon import Canonicaliser
from linkfold.ingest.rows import TIME_POSITION, Batch, RawIds, _key, _time
from linkfold.inputs import MISSING, DumpRow, RowBlock
from linkfold.pseudonyms import Pseudonymiser

_TIMES = st.one_of(
    st.datetimes(timezones=st.just(__import__("datetime").UTC)).map(lambda d: d.isoformat().replace("+00:00", "Z")),
    st.sampled_from(["2031-05-04T08:00:00Z", "2031-02-30T08:00:00Z", "2031-05-04T08:00:60Z", "2031-05-04 08:00Z",
                     "2031-05-04T08:00:00+02:00", "2031-05-04T08:00:00.123456Z", "1999-12-31T23:59:59z",
                     "  2031-05-04T08:00:00Z", "20310504T080000Z", "2031-05-04", "", " ", "1715000000", "Z" * 11,
                     "2031-05-04x08:00:00Z", "1990-12-31T23:59:60Z", "2031-W18-1T08:00:00Z"]),
    st.text(max_size=25), st.integers(), st.none(), st.just(MISSING))
_UNITS = st.one_of(st.sampled_from(["p1", " p1", "", " ", "é", "\ud800", "p\x00"]), st.text(max_size=8),
                   st.integers(), st.floats(allow_nan=False), st.none(), st.just(MISSING), st.just({"a": 1}))
_KEYS = st.one_of(st.text(max_size=12), st.sampled_from(["v1", " ", "", "a\x00b", "\ud800", "é1", "k 1 "]),
                  st.integers(), st.none(), st.just(MISSING))


@settings(max_examples=500, deadline=None)
@given(key=_KEYS, when=_TIMES)
def test_inline_key_and_time_match_the_general_rules(key, when):
    batch = Batch(Canonicaliser(), dataset_id=1, file_id=1, keyed=True, timed=True)
    batch.add(DumpRow(7, 7, ["https://a.example/p"], key, when))
    (sighting,) = batch.sightings
    want_key, key_problem = _key(key, 7)
    want_time, time_problem = _time(when)
    assert sighting[4] == want_key and sighting[5] == want_time
    assert type(sighting[5]) is type(want_time)
    got = {(r[3], r[4]) for r in batch.rejects}
    want = {(-1, key_problem[0])} if key_problem else set()
    want |= {(TIME_POSITION, time_problem[0])} if time_problem else set()
    assert got == want


_URLS = st.one_of(st.sampled_from(["https://a.example/p", "https://a.example/p?utm_source=x", "http://b.test/q",
                                   "", " ", "not a url", "https://a.example/\x00", "https://é.example/",
                                   "https://a.example/known"]), st.text(max_size=20))


@settings(max_examples=300, deadline=None)
@given(rows=st.lists(st.tuples(st.one_of(_URLS, st.integers(), st.none(), st.lists(st.integers(), max_size=2)),
                               st.one_of(st.text(max_size=12), _KEYS), _TIMES, _UNITS), max_size=12),
       keyed=st.booleans(), timed=st.booleans(), united=st.booleans(),
       cut=st.tuples(st.integers(0, 12), st.integers(0, 12)))
def test_a_block_is_staged_as_its_rows_one_by_one(rows, keyed, timed, united, cut):
    # Behaviour test: the block path has its own inline checks; every row it does not take as the usual
    # one must go through add(), and the rows it takes must come out as add() would have them. Values of
    # any JSON type, as JSON-lines blocks carry them.
    start, stop = sorted((min(cut[0], len(rows)), min(cut[1], len(rows))))
    block = RowBlock(5, [r[0] for r in rows], [r[1] for r in rows], [r[2] for r in rows],
                     [r[3] for r in rows] if united else None)

    def batch() -> Batch:
        ids = RawIds(64)
        ids["https://a.example/known"] = 41  # a raw URL whose id the load already has
        units = Pseudonymiser(b"k" * 32) if united else None
        return Batch(Canonicaliser(), dataset_id=1, file_id=2, keyed=keyed, timed=timed, ids=ids, units=units)

    whole, single = batch(), batch()
    whole.add_block(block, start, stop)
    for row in list(block.rows())[start:stop]:
        single.add(DumpRow(row.line_no, row.end_line, row.urls, row.key if keyed else MISSING,
                           row.time if timed else MISSING, unit=row.unit))
    assert whole.sightings == single.sightings
    assert whole.rejects == single.rejects
    assert whole.pending == single.pending and whole.raws == single.raws
    assert whole.count == single.count == stop - start


def test_raw_ids_keep_what_the_load_keeps_meeting():
    # Behaviour test of the two generations: a raw URL met in every generation survives any number of
    # turns; one not met for a whole generation is dropped; the size stays within twice the bound.
    ids = RawIds(16)

    def commit(texts: list[str]) -> None:
        raws = [(f"h-{x}", x, None) for x in texts]
        ids.offer(raws, {f"h-{x}": 1000 + len(x) for x in texts})
        ids.absorb()

    commit(["popular", "once"])
    for turn in range(6):
        assert ids.get("popular") == 1007  # met again in every generation
        commit([f"new-{turn}-{i}" for i in range(16)])  # fills young: a turn of generations
        assert len(ids) <= 2 * 16 + 1
    assert "popular" in ids and "once" not in ids
    assert ids.get("once") is None
