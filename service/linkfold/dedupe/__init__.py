"""The maths of dedupe: shingles, MinHash signatures, LSH banding, verification, clustering, stable IDs.

Pure functions on numpy arrays and small dataclasses: no database, no network, no files. The storage
stage calls these; docs/dedupe.md specifies each step precisely enough to be reproduced elsewhere.
"""

from __future__ import annotations

from .bands import Candidates, band_keys, candidate_pairs
from .cluster import Clustering, Edge, Refusal, cluster
from .curve import BandingOption, banding_options, render_curve, render_histogram, s_curve, threshold_point
from .ids import (
    EventKind,
    IdEvent,
    IdState,
    IdUpdate,
    MemberChange,
    assign_ids,
    check_state,
    derive_id,
    mint_id,
)
from .minhash import (
    SCHEMES,
    SignatureParams,
    empty_rows,
    empty_value,
    estimate_jaccard,
    minhash_signatures,
    permutations,
    signature_from_bytes,
    signature_to_bytes,
    signatures_from_texts,
)
from .shingle import (
    HASH_NAME,
    WordHasher,
    batch_shingle_hashes,
    exact_jaccard,
    normalise_words,
    shingle_hashes,
    shingles_from_bytes,
    shingles_to_bytes,
)
from .titles import MIN_TITLE_WORDS, TITLE_KEY_NAME, title_keys, title_word_count
from .verify import (
    DocFeatures,
    Level,
    Reason,
    SimilarityLink,
    Thresholds,
    Verdict,
    title_ratio,
    verify_pair,
    verify_pairs,
)

__all__ = [
    "HASH_NAME",
    "MIN_TITLE_WORDS",
    "SCHEMES",
    "TITLE_KEY_NAME",
    "BandingOption",
    "Candidates",
    "Clustering",
    "DocFeatures",
    "Edge",
    "EventKind",
    "IdEvent",
    "IdState",
    "IdUpdate",
    "Level",
    "MemberChange",
    "Reason",
    "Refusal",
    "SignatureParams",
    "SimilarityLink",
    "Thresholds",
    "Verdict",
    "WordHasher",
    "assign_ids",
    "band_keys",
    "banding_options",
    "batch_shingle_hashes",
    "candidate_pairs",
    "check_state",
    "cluster",
    "derive_id",
    "empty_rows",
    "empty_value",
    "estimate_jaccard",
    "exact_jaccard",
    "minhash_signatures",
    "mint_id",
    "normalise_words",
    "permutations",
    "render_curve",
    "render_histogram",
    "s_curve",
    "shingle_hashes",
    "shingles_from_bytes",
    "shingles_to_bytes",
    "signature_from_bytes",
    "signature_to_bytes",
    "signatures_from_texts",
    "threshold_point",
    "title_keys",
    "title_ratio",
    "title_word_count",
    "verify_pair",
    "verify_pairs",
]
