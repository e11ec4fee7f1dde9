"""LSH banding: signature → one 64-bit key per band, and candidate pairs from equal keys.

Band ``i`` of a signature is the slice ``[i·rows, (i+1)·rows)``; positions past ``bands·rows`` are not
banded (they still count in the Jaccard estimate). Its key is the shingle chain of docs/dedupe.md run
over ``[i, v_0, …, v_{rows−1}]`` (each widened to uint64), read as a signed int64 so it fits a BIGINT
column on both database backends. Putting the band index into the hash means one indexed
(band, key) column pair answers "who shares a band with whom" without a key in one band ever meeting
the same key in another.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .shingle import CHAIN_START, fmix64_inplace


def band_keys(signatures: np.ndarray, bands: int, rows: int | None = None) -> np.ndarray:
    """Keys of shape (n, bands), dtype int64. ``rows`` defaults to ``num_perm // bands``."""
    sig = np.asarray(signatures)
    if sig.ndim != 2:
        raise ValueError(f"signatures must be a 2-d array, not shape {sig.shape}")
    n, num_perm = sig.shape
    rows = num_perm // bands if rows is None else rows
    if bands < 1 or rows < 1 or bands * rows > num_perm:
        raise ValueError(f"cannot cut {num_perm} values into {bands} bands of {rows} rows")
    # Work band-major, (bands, n), so every step is a contiguous 1-d pass; the result is returned as
    # the transposed view, shape (n, bands), whose columns (one band of all documents) are contiguous,
    # which is the access pattern of candidate generation and of a per-band bulk insert.
    vals = np.ascontiguousarray(sig[:, :bands * rows].T).reshape(bands, rows, n)
    h = np.empty((bands, n), dtype=np.uint64)
    h[:] = (CHAIN_START ^ np.arange(bands, dtype=np.uint64))[:, None]
    fmix64_inplace(h)
    for j in range(rows):
        h ^= vals[:, j, :]
        fmix64_inplace(h)
    return h.view(np.int64).T


@dataclass(frozen=True)
class Candidates:
    """Candidate pairs ``(i, j)`` with ``i < j`` (row indices into the signature array), sorted.

    ``oversize_buckets`` counts (band, key) buckets skipped because they held more than ``max_bucket``
    documents; ``largest_bucket`` is the largest bucket seen. Both are reported so a skipped bucket (a
    boilerplate text shared by thousands of pages) is never a silent loss of recall.
    """

    pairs: np.ndarray
    oversize_buckets: int
    largest_bucket: int


def _pairs_in_groups(docs: np.ndarray, group: np.ndarray, max_size: int) -> list[np.ndarray]:
    """All (docs[x], docs[y]) with x < y in the same group; ``group`` is sorted, runs are groups."""
    found: list[np.ndarray] = []
    for d in range(1, max_size):
        same = group[:-d] == group[d:]
        if not same.any():
            break
        found.append(np.stack([docs[:-d][same], docs[d:][same]], axis=1))
    return found


def candidate_pairs(keys: np.ndarray, *, exclude: np.ndarray | None = None,
                    max_bucket: int | None = None) -> Candidates:
    """Every pair of rows that shares at least one band key (the in-memory form of the band-table join).

    ``exclude`` masks rows that must never be candidates (empty texts: their signatures are all equal).
    Buckets larger than ``max_bucket`` are skipped and counted; ``None`` keeps every bucket.
    """
    keys = np.asarray(keys)
    if keys.dtype != np.int64:
        keys = keys.astype(np.int64)
    n, bands = keys.shape
    rows_in = np.arange(n, dtype=np.int64)
    if exclude is not None:
        rows_in = rows_in[~np.asarray(exclude, dtype=bool)]
    codes: list[np.ndarray] = []
    oversize = 0
    largest = 1 if len(rows_in) else 0
    for band in range(bands):
        k = keys[:, band] if exclude is None else keys[rows_in, band]
        order = np.argsort(k)
        sk, docs = k[order], rows_in[order]
        if len(sk) < 2:
            continue
        starts = np.flatnonzero(np.concatenate(([True], sk[1:] != sk[:-1])))
        sizes = np.diff(np.append(starts, len(sk)))
        largest = max(largest, int(sizes.max()))
        keep = sizes >= 2
        if max_bucket is not None:
            oversize += int(np.count_nonzero(sizes > max_bucket))
            keep &= sizes <= max_bucket
        if not keep.any():
            continue
        member = np.repeat(keep, sizes)
        group = np.repeat(np.arange(len(sizes)), sizes)[member]
        for p in _pairs_in_groups(docs[member], group, int(sizes[keep].max())):
            lo, hi = np.minimum(p[:, 0], p[:, 1]), np.maximum(p[:, 0], p[:, 1])
            codes.append(lo * n + hi)
    if codes:
        # sort + run mask rather than np.unique, whose hash-based path is several times slower here
        unique = np.concatenate(codes)
        unique.sort()
        unique = unique[np.concatenate(([True], unique[1:] != unique[:-1]))]
        pairs = np.stack([unique // n, unique % n], axis=1)
    else:
        pairs = np.empty((0, 2), dtype=np.int64)
    return Candidates(pairs=pairs, oversize_buckets=oversize, largest_bucket=largest)
