"""The corpus: one text per story (or article) seen in the chosen datasets, for topic models and keyword
counts, with its exposure per dataset; syndicated copies appear once.

``corpus_records`` streams the records (one SELECT, query.py; the representative document is the
earliest-published current document of the cluster, ties to the smallest url key); ``write_corpus``
writes them as JSON lines or Parquet; ``read_corpus`` reads either back; ``prepare`` adds tokens, lower
case, stop words per language and n-grams beside the raw text. The reference is docs/corpus.md.
"""

from __future__ import annotations

from .prepare import MAX_NGRAM, RAW, Preparation, language_code, ngrams_of, prepare, stop_word_set, tokens_of
from .query import ID_COLUMN, LEVELS, corpus_select, representatives, seen_select
from .records import YIELD_PER, Corpus, CorpusTally, corpus_fields, corpus_records, dataset_ids
from .write import (
    CORPUS_FORMATS,
    ROW_GROUP,
    CorpusSummary,
    parquet_schema,
    read_corpus,
    record_json,
    write_corpus,
)

__all__ = [
    "CORPUS_FORMATS",
    "ID_COLUMN",
    "LEVELS",
    "MAX_NGRAM",
    "RAW",
    "ROW_GROUP",
    "YIELD_PER",
    "Corpus",
    "CorpusSummary",
    "CorpusTally",
    "Preparation",
    "corpus_fields",
    "corpus_records",
    "corpus_select",
    "dataset_ids",
    "language_code",
    "ngrams_of",
    "parquet_schema",
    "prepare",
    "read_corpus",
    "record_json",
    "representatives",
    "seen_select",
    "stop_word_set",
    "tokens_of",
    "write_corpus",
]
