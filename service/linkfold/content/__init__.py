"""Pages and documents: reading stored HTML, decoding it, and extracting article text.

Pure functions and readers, no database and no network: the fetch, import, load and extract stages are
thin shells over them. docs/content.md describes the input formats, the document fields, the usable-text
rules, the charset order, the date rules and the declared-canonical policy.
"""

from __future__ import annotations

from .canonical_link import DeclaredLink, DeclaredUrls, Relation, declared_link, read_declared_urls
from .charset import EncodingChoice, decode_html, lookup_label, sniff_encoding
from .documents import DOCUMENT_FIELDS, DocumentProblem, document_from_record, read_documents
from .extract import EXTRACTION_OPTIONS, Document, extract_document, extractor_version
from .mediatype import is_html, parse_content_type
from .pages import (
    KEPT_HEADERS,
    MANIFEST_NAME,
    Page,
    PageProblem,
    ReadTally,
    detect_page_format,
    read_page_dir,
    read_page_jsonl,
    read_pages,
    read_warc,
)
from .text import CONTENT_VERSION, count_words, normalise_text, text_hash
from .usable import DEFAULT_RULES, Status, Unusable, UsableTextRules

__all__ = [
    "CONTENT_VERSION",
    "DEFAULT_RULES",
    "DOCUMENT_FIELDS",
    "EXTRACTION_OPTIONS",
    "KEPT_HEADERS",
    "MANIFEST_NAME",
    "DeclaredLink",
    "DeclaredUrls",
    "Document",
    "DocumentProblem",
    "EncodingChoice",
    "Page",
    "PageProblem",
    "ReadTally",
    "Relation",
    "Status",
    "Unusable",
    "UsableTextRules",
    "count_words",
    "declared_link",
    "decode_html",
    "detect_page_format",
    "document_from_record",
    "extract_document",
    "extractor_version",
    "is_html",
    "lookup_label",
    "normalise_text",
    "parse_content_type",
    "read_declared_urls",
    "read_documents",
    "read_page_dir",
    "read_page_jsonl",
    "read_pages",
    "read_warc",
    "sniff_encoding",
    "text_hash",
]
