"""The public face of linkfold.content: everything listed is importable, nothing listed twice."""

from __future__ import annotations

import linkfold.content as content


def test_public_names_are_importable_and_unique():
    assert len(content.__all__) == len(set(content.__all__))
    for name in content.__all__:
        assert hasattr(content, name), name


def test_readers_and_extraction_are_public():
    # The stages (pages load, documents load, extract) are shells over exactly these.
    for name in ("read_pages", "read_warc", "read_page_dir", "read_page_jsonl", "read_documents",
                 "extract_document", "decode_html", "declared_link", "Page", "PageProblem", "Document"):
        assert name in content.__all__, name
