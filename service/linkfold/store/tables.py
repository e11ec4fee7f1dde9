"""Every table of the registry, as SQLAlchemy Core definitions.

Alembic owns the schema (``linkfold/migrations/``); these definitions are what the code queries with,
and a test checks that a database migrated to head matches them column for column. Change both together.

Conventions: integer surrogate keys named ``id``; times are timezone-aware UTC; nothing in the
append-only tables (raw URLs, sightings, rejects, canonical URLs, changes) is ever updated in place
except the ``current`` pointers that say which row is in force.
"""

from __future__ import annotations

import sqlalchemy as sa

NAMING = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}

metadata = sa.MetaData(naming_convention=NAMING)

# Row identifiers of the tables that grow with the data (URLs, sightings' URLs, pages, documents, links,
# events) and every column that refers to one: 64-bit on PostgreSQL (migration 0023), because a lab that
# pools years of panel and platform data passes 2**31 rows; on SQLite an INTEGER is already 64-bit, and
# a primary key declared INTEGER stays the row id (a BIGINT one would not).
ID = sa.BigInteger().with_variant(sa.Integer(), "sqlite")

UTC = sa.DateTime(timezone=True)

# --- runs ---------------------------------------------------------------------------------------------
runs = sa.Table(
    "runs", metadata,
    sa.Column("id", sa.Integer, primary_key=True),
    sa.Column("stage", sa.String(40), nullable=False),
    sa.Column("state", sa.String(20), nullable=False),  # running | ok | failed | interrupted
    sa.Column("parent_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Column("started_at", UTC, nullable=False),
    sa.Column("finished_at", UTC, nullable=True),
    sa.Column("counts", sa.JSON, nullable=True),
    sa.Column("detail", sa.Text, nullable=True),  # why it failed, for people (migration 0022: was error)
    sa.Column("host", sa.String(255), nullable=True),
    sa.Column("pid", sa.Integer, nullable=True),
    sa.Index("ix_runs_stage_started", "stage", "started_at"),
)

# --- rulesets -----------------------------------------------------------------------------------------
rulesets = sa.Table(
    "rulesets", metadata,
    sa.Column("id", sa.Integer, primary_key=True),  # the ruleset version: 1, 2, 3 … in order of storing
    sa.Column("name", sa.String(200), nullable=False),
    sa.Column("digest", sa.String(64), nullable=False, unique=True),  # SHA-256 of source + canon version
    sa.Column("source", sa.Text, nullable=False),  # the TOML text as stored, so a version can be re-read
    sa.Column("canon_version", sa.String(40), nullable=False),
    sa.Column("psl_version", sa.String(40), nullable=False),
    sa.Column("created_at", UTC, nullable=False),
)

# The hosts a ruleset gives a role (migration 0012): ``shortener`` for its ``shortener_hosts``, whose URLs
# stand for nothing known until they are followed. Written when the ruleset is stored, so SQL (the
# ``sighting_links`` view) can tell a short link by its host under the newest ruleset.
ruleset_hosts = sa.Table(
    "ruleset_hosts", metadata,
    sa.Column("ruleset_id", sa.Integer, sa.ForeignKey("rulesets.id"), primary_key=True),
    sa.Column("role", sa.String(20), primary_key=True),
    sa.Column("host", sa.String(255), primary_key=True),
)

# --- datasets and their files -------------------------------------------------------------------------
datasets = sa.Table(
    "datasets", metadata,
    sa.Column("id", sa.Integer, primary_key=True),
    sa.Column("name", sa.String(200), nullable=False, unique=True),
    sa.Column("description", sa.Text, nullable=True),
    sa.Column("ruleset_id", sa.Integer, sa.ForeignKey("rulesets.id"), nullable=True),
    sa.Column("created_at", UTC, nullable=False),
)

dataset_files = sa.Table(
    "dataset_files", metadata,
    sa.Column("id", sa.Integer, primary_key=True),
    sa.Column("dataset_id", sa.Integer, sa.ForeignKey("datasets.id"), nullable=False),
    sa.Column("file_name", sa.Text, nullable=False),
    sa.Column("sha256", sa.String(64), nullable=False),
    sa.Column("size_bytes", sa.BigInteger, nullable=False),
    sa.Column("format", sa.String(20), nullable=False),
    sa.Column("options", sa.JSON, nullable=True),  # url/key/time columns as given
    sa.Column("state", sa.String(20), nullable=False),  # loading | complete
    sa.Column("ruleset_id", sa.Integer, sa.ForeignKey("rulesets.id"), nullable=True),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Column("rows", sa.BigInteger, nullable=False, server_default="0"),
    sa.Column("sightings", sa.BigInteger, nullable=False, server_default="0"),
    sa.Column("rejects", sa.BigInteger, nullable=False, server_default="0"),
    # Last input line covered by committed batches (migration 0003): where a resumed load picks up.
    sa.Column("lines_done", sa.BigInteger, nullable=False, server_default="0"),
    sa.Column("started_at", UTC, nullable=False),
    sa.Column("loaded_at", UTC, nullable=True),
    sa.UniqueConstraint("dataset_id", "sha256"),
)

# --- URLs -----------------------------------------------------------------------------------------------
canonical_urls = sa.Table(
    "canonical_urls", metadata,
    sa.Column("id", ID, primary_key=True),
    sa.Column("url_key", sa.String(32), nullable=False, unique=True),
    sa.Column("url", sa.Text, nullable=False),
    sa.Column("host", sa.String(255), nullable=False),
    sa.Column("domain", sa.String(255), nullable=True),  # registered domain (Public Suffix List)
    sa.Column("outlet", sa.String(255), nullable=True),
    sa.Column("is_article", sa.Boolean, nullable=True),
    sa.Column("ruleset_id", sa.Integer, sa.ForeignKey("rulesets.id"), nullable=True),  # first producer
    sa.Column("created_at", UTC, nullable=False),
    # The canonical URL this one leads to at the end of its followed chains (migration 0012; store/finals.py):
    # NULL when no resolved chain leads elsewhere. Kept by the follow stage and redirect imports in the
    # transaction of their results, from ids read in it; nothing deletes canonical URLs, and
    # tests/test_ingest_integrity.py checks the reference. No foreign key: on SQLite adding one means
    # rebuilding the table every other table references, on PostgreSQL every bulk insert would pay for it.
    sa.Column("final_id", ID, nullable=True),
    sa.Index("ix_canonical_urls_domain", "domain"),
    sa.Index("ix_canonical_urls_host", "host"),
)

# Declared here, enforced by SQLite, not created on PostgreSQL (migration 0010): there a foreign key costs a
# query and a row lock per inserted row, and these are inserted in bulk. Every writer takes the value from a
# row it reads in the same transaction and nothing deletes rulesets or canonical URLs;
# tests/test_ingest_integrity.py checks the references.
UNENFORCED_ON_POSTGRESQL = frozenset({
    "fk_raw_urls_canonical_id_canonical_urls", "fk_raw_urls_ruleset_id_rulesets",
    "fk_canonical_urls_ruleset_id_rulesets",
})

raw_urls = sa.Table(
    "raw_urls", metadata,
    sa.Column("id", ID, primary_key=True),
    sa.Column("raw_hash", sa.String(64), nullable=False, unique=True),  # SHA-256 hex of the UTF-8 text
    sa.Column("raw", sa.Text, nullable=False),
    # The canonical URL in force and the ruleset that produced it; NULL with ``reason`` for unparsable.
    sa.Column("canonical_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=True),
    sa.Column("ruleset_id", sa.Integer, sa.ForeignKey("rulesets.id"), nullable=True),
    sa.Column("reason", sa.String(40), nullable=True),  # the canonicaliser's key (0022: was error)
    sa.Column("created_at", UTC, nullable=False),
    sa.Index("ix_raw_urls_canonical_id", "canonical_id"),
)

# Old→new mapping written when a raw URL is re-canonicalised under a newer ruleset.
canon_changes = sa.Table(
    "canon_changes", metadata,
    sa.Column("id", ID, primary_key=True),
    sa.Column("raw_url_id", ID, sa.ForeignKey("raw_urls.id"), nullable=False),
    sa.Column("old_canonical_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=True),
    sa.Column("new_canonical_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=True),
    sa.Column("ruleset_id", sa.Integer, sa.ForeignKey("rulesets.id"), nullable=False),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Column("changed_at", UTC, nullable=False),
    sa.Index("ix_canon_changes_raw_url_id", "raw_url_id"),
)

# --- sightings and rejects ------------------------------------------------------------------------------
# No foreign keys and no index on dataset_id, on purpose (migration 0009): PostgreSQL checks a foreign key
# with a query per inserted row, which cost three quarters of a bulk load. Every sighting is written by
# loads.write_batch, which resolves raw_url_id by a join on raw_urls' unique key in the transaction
# that also holds its file row; nothing deletes raw URLs, files or datasets. tests/test_ingest_integrity.py
# checks that no reference dangles. Queries by dataset go through the dataset's files (file_id leads the
# unique key). On PostgreSQL the id is a bigint without an index (migration 0011): the natural key below is
# how a sighting is found, and the primary-key index served no query; on SQLite it is the row id.
sightings = sa.Table(
    "sightings", metadata,
    sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), primary_key=True),
    sa.Column("dataset_id", sa.Integer, nullable=False),      # datasets.id (not enforced, see above)
    sa.Column("file_id", sa.Integer, nullable=False),         # dataset_files.id
    sa.Column("line_no", sa.BigInteger, nullable=False),
    sa.Column("position", sa.Integer, nullable=False),  # n-th URL of the row, from 0
    sa.Column("row_key", sa.Text, nullable=False),
    sa.Column("seen_at", UTC, nullable=True),
    sa.Column("raw_url_id", ID, nullable=False),      # raw_urls.id
    # The person or account the row belongs to, only ever as a keyed pseudonym (HMAC under the lab's
    # pseudonym_key; migration 0017); NULL when the load named no unit column.
    sa.Column("unit", sa.Text, nullable=True),
    sa.UniqueConstraint("file_id", "line_no", "position"),
    sa.Index("ix_sightings_raw_url_id", "raw_url_id"),
)

rejects = sa.Table(
    "rejects", metadata,
    sa.Column("id", ID, primary_key=True),
    sa.Column("dataset_id", sa.Integer, sa.ForeignKey("datasets.id"), nullable=False),
    sa.Column("file_id", sa.Integer, sa.ForeignKey("dataset_files.id"), nullable=False),
    sa.Column("line_no", sa.BigInteger, nullable=False),
    sa.Column("position", sa.Integer, nullable=False),  # 0, 1 …: the row's URLs; -1: the row or its key; -2: its time
    sa.Column("reason", sa.String(40), nullable=False),
    sa.Column("detail", sa.Text, nullable=True),
    sa.Column("excerpt", sa.Text, nullable=True),  # at most a few hundred characters of the input
    sa.Column("raw_url_id", ID, sa.ForeignKey("raw_urls.id"), nullable=True),
    sa.UniqueConstraint("file_id", "line_no", "position"),
    sa.Index("ix_rejects_dataset_id", "dataset_id"),
    sa.Index("ix_rejects_dataset_reason", "dataset_id", "reason"),  # migration 0003
)

# --- evidence and link following (migration 0004) -------------------------------------------------------
# One row per piece of evidence that two canonical URLs are the same thing. ``kind`` is ``redirect``
# (written by ``linkfold follow``); later stages add ``declared``, ``same_text``, ``similar_text``,
# ``manual``. Rows are never updated or deleted.
links = sa.Table(
    "links", metadata,
    sa.Column("id", ID, primary_key=True),
    sa.Column("kind", sa.String(20), nullable=False),
    sa.Column("src_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=False),
    sa.Column("dst_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=False),
    sa.Column("status", sa.Integer, nullable=True),  # HTTP status of a redirect hop
    sa.Column("hop", sa.Integer, nullable=True),  # 1-based position of the hop in its chain
    sa.Column("source", sa.String(255), nullable=True),  # fetched | import:<file name>
    sa.Column("detail", sa.JSON, nullable=True),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Column("created_at", UTC, nullable=False),
    sa.Index("ix_links_src_id", "src_id"),
    sa.Index("ix_links_dst_id", "dst_id"),
    sa.Index("ix_links_kind", "kind"),
)

# The latest follow outcome per canonical URL (updated in place); its history is ``follow_attempts``.
follow_results = sa.Table(
    "follow_results", metadata,
    sa.Column("id", ID, primary_key=True),
    sa.Column("canonical_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=False, unique=True),
    sa.Column("state", sa.String(20), nullable=False),  # resolved | failed | refused
    sa.Column("failure", sa.String(30), nullable=True),  # dns, timeout, http_4xx … (docs/following.md)
    sa.Column("http_status", sa.Integer, nullable=True),
    sa.Column("final_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=True),
    sa.Column("hops", sa.Integer, nullable=True),
    sa.Column("via", sa.String(20), nullable=False),  # fetched | chain | imported
    sa.Column("attempts", sa.Integer, nullable=False),
    sa.Column("first_attempt_at", UTC, nullable=False),
    sa.Column("last_attempt_at", UTC, nullable=False),
    sa.Column("next_attempt_at", UTC, nullable=True),  # when --retry-failed may try again
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    # Why a URL was refused, as a stable key (private, loopback …, robots_file; migration 0016).
    sa.Column("reason", sa.String(40), nullable=True),
    sa.Index("ix_follow_results_state_next", "state", "next_attempt_at"),
    sa.Index("ix_follow_results_final_id", "final_id"),  # which links lead to a URL (store/finals.py; 0012)
)

follow_attempts = sa.Table(
    "follow_attempts", metadata,
    sa.Column("id", ID, primary_key=True),
    sa.Column("canonical_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=False),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Column("attempted_at", UTC, nullable=False),
    sa.Column("state", sa.String(20), nullable=False),
    sa.Column("failure", sa.String(30), nullable=True),
    sa.Column("http_status", sa.Integer, nullable=True),
    sa.Column("final_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=True),
    sa.Column("hops", sa.Integer, nullable=True),
    sa.Column("detail", sa.Text, nullable=True),  # a short reason for people, never a response body
    sa.Index("ix_follow_attempts_canonical_id", "canonical_id"),
)

# --- jobs -------------------------------------------------------------------------------------------------
# Who holds an exclusive job lock (the nightly job); see store/locks.py for how stale rows are detected.
job_locks = sa.Table(
    "job_locks", metadata,
    sa.Column("name", sa.String(40), primary_key=True),
    sa.Column("host", sa.String(255), nullable=False),
    sa.Column("pid", sa.Integer, nullable=False),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Column("acquired_at", UTC, nullable=False),
    sa.Column("heartbeat_at", UTC, nullable=False),
)

# --- pages and documents (migration 0006) ---------------------------------------------------------------
# One stored response per canonical URL and body: fetched (``source`` = ``fetch``) or imported
# (``warc:<file name>#<offset>``, ``dir:<dir name>/<file>``, ``jsonl:<file name>:<line>``). Only the headers
# that matter are kept (content-type, content-language, last-modified, etag…); never cookies or request
# headers. ``body`` is zlib-compressed; ``body_size`` and ``body_sha256`` describe the uncompressed bytes
# as stored, which stop at the size cap when ``truncated``. Rows are never updated.
pages = sa.Table(
    "pages", metadata,
    sa.Column("id", ID, primary_key=True),
    sa.Column("canonical_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=False),
    sa.Column("requested_url", sa.Text, nullable=False),
    sa.Column("final_url", sa.Text, nullable=False),
    sa.Column("final_canonical_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=True),
    sa.Column("status", sa.Integer, nullable=True),  # NULL for pages imported without a status
    sa.Column("headers", sa.JSON, nullable=True),
    sa.Column("body", sa.LargeBinary, nullable=False),
    sa.Column("body_size", sa.BigInteger, nullable=False),
    sa.Column("truncated", sa.Boolean, nullable=False),
    sa.Column("body_sha256", sa.String(64), nullable=False),
    sa.Column("source", sa.Text, nullable=False),
    sa.Column("fetched_at", UTC, nullable=True),  # when the response was received, if known
    sa.Column("stored_at", UTC, nullable=False),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.UniqueConstraint("canonical_id", "body_sha256"),  # the same bytes for the same URL are one page
    sa.Index("ix_pages_canonical_id", "canonical_id"),
    sa.Index("ix_pages_final_canonical_id", "final_canonical_id"),  # "has a page" looks both ways
)

# The latest fetch outcome per canonical URL (updated in place), in the shape of ``follow_results``.
fetch_results = sa.Table(
    "fetch_results", metadata,
    sa.Column("id", ID, primary_key=True),
    sa.Column("canonical_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=False, unique=True),
    sa.Column("state", sa.String(20), nullable=False),  # fetched | failed | refused
    sa.Column("failure", sa.String(30), nullable=True),  # the follow stage's failure classes
    sa.Column("http_status", sa.Integer, nullable=True),
    sa.Column("page_id", ID, sa.ForeignKey("pages.id"), nullable=True),
    sa.Column("attempts", sa.Integer, nullable=False),
    sa.Column("first_attempt_at", UTC, nullable=False),
    sa.Column("last_attempt_at", UTC, nullable=False),
    sa.Column("next_attempt_at", UTC, nullable=True),  # NULL: never retried automatically
    sa.Column("detail", sa.Text, nullable=True),  # a short reason for people, never a response body
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Index("ix_fetch_results_state_next", "state", "next_attempt_at"),
)

# One document per page and extractor version, or per loaded record (``page_id`` NULL,
# ``record_sha256`` set so a reloaded file adds nothing). ``state`` is usable | no_text; a no_text row
# keeps its ``reason`` and no text. The current document of a canonical URL is its newest usable
# row (docs/content.md).
documents = sa.Table(
    "documents", metadata,
    sa.Column("id", ID, primary_key=True),
    sa.Column("canonical_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=False),
    sa.Column("page_id", ID, sa.ForeignKey("pages.id"), nullable=True),
    sa.Column("title", sa.Text, nullable=True),
    sa.Column("text", sa.Text, nullable=True),
    sa.Column("text_hash", sa.String(64), nullable=True),
    sa.Column("word_count", sa.Integer, nullable=False),
    sa.Column("author", sa.Text, nullable=True),
    sa.Column("published", UTC, nullable=True),
    sa.Column("published_source", sa.String(40), nullable=True),
    sa.Column("language", sa.String(35), nullable=True),  # BCP 47 tag
    sa.Column("declared_canonical", sa.Text, nullable=True),
    sa.Column("og_url", sa.Text, nullable=True),
    sa.Column("amp_url", sa.Text, nullable=True),
    sa.Column("state", sa.String(20), nullable=False),  # usable | no_text (migration 0022: was status)
    sa.Column("reason", sa.String(30), nullable=True),  # why no_text (0022: was unusable_reason)
    sa.Column("extractor_version", sa.String(80), nullable=False),
    sa.Column("source", sa.Text, nullable=False),
    sa.Column("record_sha256", sa.String(64), nullable=True),
    sa.Column("created_at", UTC, nullable=False),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.UniqueConstraint("page_id", "extractor_version"),
    sa.UniqueConstraint("record_sha256"),
    sa.Index("ix_documents_canonical_id", "canonical_id"),
    sa.Index("ix_documents_text_hash", "text_hash"),
)

# --- dedupe: signatures, band keys, decisions, IDs (migration 0007) ------------------------------------------
# One MinHash signature per signed document, with its parameter record (``SignatureParams.band_token``:
# the signature's settings plus the banding its band keys were cut with). docs/dedupe.md, "The stage".
signatures = sa.Table(
    "signatures", metadata,
    sa.Column("document_id", ID, sa.ForeignKey("documents.id"), primary_key=True),
    sa.Column("params", sa.String(120), nullable=False),
    sa.Column("signature", sa.LargeBinary, nullable=False),
    sa.Column("created_at", UTC, nullable=False),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
)

# LSH band keys of the current document of each canonical URL; a superseded document's keys are removed
# (they are derived data, rebuilt from ``signatures``). The (band, key) index answers candidate joins.
band_keys = sa.Table(
    "band_keys", metadata,
    sa.Column("document_id", ID, sa.ForeignKey("signatures.document_id"), primary_key=True),
    sa.Column("band", sa.SmallInteger, primary_key=True),
    sa.Column("key", sa.BigInteger, nullable=False),
    sa.Index("ix_band_keys_band_key", "band", "key"),
)

# Title keys (``linkfold.dedupe.titles``) of the current document of each canonical URL that has a
# publication date, so short texts whose titles decide meet as candidates (migration 0015); removed with
# the band keys when a document is superseded.
title_keys = sa.Table(
    "title_keys", metadata,
    sa.Column("document_id", ID, sa.ForeignKey("signatures.document_id"), primary_key=True),
    sa.Column("key", sa.BigInteger, primary_key=True),
    sa.Index("ix_title_keys_key", "key"),
)

# A person's verdicts, append-only: the latest decision on a pair (level, a_member, b_member with
# a_member < b_member) is in force; earlier ones are kept. ``*_ref`` is what the person typed,
# ``*_member`` the canonical URL it anchors to (the URL itself, or the founder of the ID named),
# ``*_cluster`` the live ID an ID reference resolved to when the decision was taken.
decisions = sa.Table(
    "decisions", metadata,
    sa.Column("id", sa.Integer, primary_key=True),
    sa.Column("verdict", sa.String(20), nullable=False),  # same | different
    sa.Column("level", sa.String(10), nullable=False),  # article | story
    sa.Column("a_ref", sa.Text, nullable=False),
    sa.Column("b_ref", sa.Text, nullable=False),
    sa.Column("a_member", ID, sa.ForeignKey("canonical_urls.id"), nullable=False),
    sa.Column("b_member", ID, sa.ForeignKey("canonical_urls.id"), nullable=False),
    sa.Column("a_cluster", sa.String(24), nullable=True),
    sa.Column("b_cluster", sa.String(24), nullable=True),
    sa.Column("note", sa.Text, nullable=True),
    sa.Column("decided_by", sa.String(200), nullable=False),
    sa.Column("decided_at", UTC, nullable=False),
    sa.Index("ix_decisions_level_pair", "level", "a_member", "b_member"),
    sa.Index("ix_decisions_b_member", "b_member"),
)

# Every article and story ID ever issued. ``stem`` is the ID without its counter suffix (what
# ``derive_id`` gave for the first founder), so a new mint checks clashes with an indexed lookup.
# ``founder_id`` is the current founder: a person moving the founder out hands it to a remaining member.
cluster_ids = sa.Table(
    "cluster_ids", metadata,
    sa.Column("id", sa.String(24), primary_key=True),
    sa.Column("level", sa.String(10), nullable=False),
    sa.Column("stem", sa.String(16), nullable=False),
    sa.Column("founder_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=False),
    sa.Column("mint_order", sa.BigInteger, nullable=False),  # per level; smaller = older
    sa.Column("state", sa.String(10), nullable=False),  # live | retired
    sa.Column("successor", sa.String(24), nullable=True),  # set when retired (merged into it)
    sa.Column("minted_run", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Column("minted_at", UTC, nullable=False),
    sa.Column("retired_run", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Column("retired_at", UTC, nullable=True),
    sa.Index("ix_cluster_ids_stem", "stem"),
    sa.Index("ix_cluster_ids_level_order", "level", "mint_order"),
)

# The current ID of each canonical URL at each level (updated in place; its history is ``id_events``).
cluster_members = sa.Table(
    "cluster_members", metadata,
    sa.Column("level", sa.String(10), primary_key=True),
    sa.Column("canonical_id", ID, sa.ForeignKey("canonical_urls.id"), primary_key=True),
    sa.Column("cluster_id", sa.String(24), sa.ForeignKey("cluster_ids.id"), nullable=False),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Index("ix_cluster_members_cluster_id", "cluster_id"),
)

# What happened to each ID: minted (reason new_cluster | split), merged_into other_id, split_from
# other_id, founder_moved (member_id the new founder; reason moved_out); with the run and time. Append-only.
id_events = sa.Table(
    "id_events", metadata,
    sa.Column("id", ID, primary_key=True),
    sa.Column("cluster_id", sa.String(24), sa.ForeignKey("cluster_ids.id"), nullable=False),
    sa.Column("event", sa.String(20), nullable=False),
    sa.Column("other_id", sa.String(24), nullable=True),
    sa.Column("member_id", ID, sa.ForeignKey("canonical_urls.id"), nullable=True),
    sa.Column("reason", sa.String(40), nullable=False),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Column("at", UTC, nullable=False),
    sa.Index("ix_id_events_cluster_id", "cluster_id"),
    sa.Index("ix_id_events_other_id", "other_id"),
)

# Marks of incremental stages: on SQLite the last row id each has taken into account (rows commit in id
# order there); on both, fingerprints of the settings results were made under (``dedupe.params``, the sink
# policy). PostgreSQL records pending rows in ``stage_pending`` instead.
stage_marks = sa.Table(
    "stage_marks", metadata,
    sa.Column("name", sa.String(40), primary_key=True),
    sa.Column("value", sa.BigInteger, nullable=False),
    sa.Column("run_id", sa.Integer, sa.ForeignKey("runs.id"), nullable=True),
    sa.Column("updated_at", UTC, nullable=False),
)

# --- outlet lists (migration 0017) -------------------------------------------------------------------
# A lab's coded list of outlets, versioned like rulesets: each load of a list file is a new version
# (``id``, in order of loading); the newest is in force. ``columns`` names the lab-defined attribute columns
# in file order; each entry maps a registered domain or a host (``match``, lower case, as canonical URLs
# store them) to an outlet name and its attributes.
outlet_lists = sa.Table(
    "outlet_lists", metadata,
    sa.Column("id", sa.Integer, primary_key=True),
    sa.Column("name", sa.String(200), nullable=False),
    sa.Column("sha256", sa.String(64), nullable=False, unique=True),  # of the file's bytes
    sa.Column("columns", sa.JSON, nullable=False),
    sa.Column("created_at", UTC, nullable=False),
)

outlet_entries = sa.Table(
    "outlet_entries", metadata,
    sa.Column("id", sa.Integer, primary_key=True),
    sa.Column("list_id", sa.Integer, sa.ForeignKey("outlet_lists.id"), nullable=False),
    sa.Column("match", sa.String(255), nullable=False),   # a registered domain or a host
    sa.Column("outlet", sa.String(255), nullable=False),
    sa.Column("attributes", sa.JSON, nullable=False),
    sa.Column("line_no", sa.Integer, nullable=False),     # where the entry stands in the loaded file
    sa.UniqueConstraint("list_id", "match"),
    sa.Index("ix_outlet_entries_list_outlet", "list_id", "outlet"),
)

# Rows an incremental stage has still to take into account, on PostgreSQL (migration 0013;
# store/pending.py): a trigger on each watched table writes ``(topic, lo, hi)`` — the id range one
# statement inserted — in the inserting transaction; the stage deletes the entries it took on. Unused on
# SQLite, whose stage marks cannot pass over a row.
stage_pending = sa.Table(
    "stage_pending", metadata,
    sa.Column("id", sa.BigInteger().with_variant(sa.Integer, "sqlite"), primary_key=True),
    sa.Column("topic", sa.String(40), nullable=False),
    sa.Column("lo", sa.BigInteger, nullable=False),
    sa.Column("hi", sa.BigInteger, nullable=False),
    sa.Index("ix_stage_pending_topic", "topic"),
)

# --- the pseudonym key (migration 0020) -----------------------------------------------------------------
# One row once units were loaded: the scheme and a fingerprint of the key they are pseudonymised under
# (an HMAC of a fixed label, never the key: linkfold/pseudonyms.py), so a load under another key is refused.
pseudonym_keys = sa.Table(
    "pseudonym_keys", metadata,
    sa.Column("name", sa.String(40), primary_key=True),
    sa.Column("scheme", sa.String(20), nullable=False),
    sa.Column("fingerprint", sa.String(64), nullable=False),
    sa.Column("created_at", UTC, nullable=False),
)

# --- API tokens (migration 0008) --------------------------------------------------------------------------
# Bearer tokens of the HTTP API. Only the SHA-256 of a token is stored (hex); the token itself is shown
# once, when it is created. ``scope`` is read | write (write includes read). A revoked token keeps its
# row, so the log of who had access stays complete; ``last_used_at`` is refreshed at most once a minute.
api_tokens = sa.Table(
    "api_tokens", metadata,
    sa.Column("id", sa.Integer, primary_key=True),
    sa.Column("token_sha256", sa.String(64), nullable=False, unique=True),
    sa.Column("scope", sa.String(10), nullable=False),
    sa.Column("note", sa.Text, nullable=False),
    sa.Column("created_at", UTC, nullable=False),
    sa.Column("revoked_at", UTC, nullable=True),
    sa.Column("last_used_at", UTC, nullable=True),
)


def sightings_in_dataset(dataset_id: int) -> sa.ColumnElement[bool]:
    """A WHERE clause for the sightings of one dataset, through its files: sightings has no index on
    dataset_id (see the table above), and file_id leads its unique key."""
    return sightings.c.file_id.in_(sa.select(dataset_files.c.id).where(dataset_files.c.dataset_id == dataset_id))
