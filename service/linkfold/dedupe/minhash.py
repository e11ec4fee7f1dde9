"""MinHash signatures, computed for many documents at once, and their parameter record.

The permutations are the "affine" schemes of datasketch 2.x, reproduced exactly (its own source is the
specification; a test compares every value): for permutation k, with ``a_k`` odd,

    phv_k(h) = a_k · fmix(h) + b_k   (mod 2^w),    signature_k = min over the set of phv_k(h)

where ``fmix`` is MurmurHash3's finaliser at width ``w`` (32 for ``affine32``, 64 for ``affine64``) and
``a``, ``b`` come from ``numpy.random.RandomState(seed)`` as datasketch draws them. An empty set's
signature is all ``2^w − 1``. The pre-2.0 "legacy" scheme is refused: datasketch documents it as biased
on large sets, and nothing stored here predates 2.0.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import ConfigError, SignatureError
from ..progress import SILENT, Progress
from ..settings import Settings
from .shingle import HASH_NAME, WordHasher, batch_shingle_hashes

SCHEMES = ("affine32", "affine64")
_DTYPES: dict[str, type[np.unsignedinteger[Any]]] = {"affine32": np.uint32, "affine64": np.uint64}
_WIDTHS = {"affine32": 32, "affine64": 64}
_FMIX = {
    32: (np.uint32(16), np.uint32(0x85EBCA6B), np.uint32(13), np.uint32(0xC2B2AE35), np.uint32(16)),
    64: (np.uint64(33), np.uint64(0xFF51AFD7ED558CCD), np.uint64(33), np.uint64(0xC4CEB9FE1A85EC53),
         np.uint64(33)),
}
# Shingle hashes processed per pass. Each pass loops over the permutations with 1-d vector operations
# (multiply, add, segmented minimum), which numpy runs far faster than the same work on a
# (shingles × permutations) matrix; 2^20 values keep the working arrays at a few MiB, inside cache.
CHUNK_VALUES = 1 << 20


def _fmix(h: np.ndarray, width: int) -> np.ndarray:
    s1, m1, s2, m2, s3 = _FMIX[width]
    h = h ^ (h >> s1)
    h = h * m1
    h = h ^ (h >> s2)
    h = h * m2
    return h ^ (h >> s3)


_TOKEN_RE = re.compile(
    r"^lfsig1:hash=(?P<hash>[a-z0-9]+):shingle=(?P<shingle>\d+):scheme=(?P<scheme>[a-z0-9]+)"
    r":perm=(?P<perm>\d+):seed=(?P<seed>-?\d+)(?::bands=(?P<bands>\d+)x(?P<rows>\d+))?$")


@dataclass(frozen=True, slots=True)
class SignatureParams:
    """Everything that decides a signature's values, plus the banding that decides its band keys.

    ``signature_token`` (no banding) is stored beside every signature: two signatures are comparable
    only when their tokens are equal. ``band_token`` is stored beside band keys, which can be rebuilt
    from the signatures alone when the banding changes.
    """

    shingle_size: int = 5
    num_perm: int = 128
    seed: int = 1
    scheme: str = "affine32"
    hash_name: str = HASH_NAME
    bands: int = 32
    rows: int = 3

    def __post_init__(self) -> None:
        if self.scheme not in SCHEMES:
            extra = " (the pre-2.0 datasketch scheme is biased on large sets)" if self.scheme == "legacy" else ""
            raise ConfigError(f"unknown MinHash scheme {self.scheme!r}{extra}; use one of {', '.join(SCHEMES)}")
        if self.hash_name != HASH_NAME:
            raise ConfigError(f"unknown shingle hash {self.hash_name!r}; this version computes {HASH_NAME!r}")
        for name in ("shingle_size", "num_perm", "bands", "rows"):
            if getattr(self, name) < 1:
                raise ConfigError(f"{name} must be a positive integer, not {getattr(self, name)}")
        if not 0 <= self.seed < 2**32:
            # numpy's RandomState accepts seeds in [0, 2^32) only.
            raise ConfigError(f"minhash_seed must be in [0, 2^32), not {self.seed}")
        if self.bands * self.rows > self.num_perm:
            raise ConfigError(f"lsh_bands × lsh_rows ({self.bands} × {self.rows}) exceeds num_perm "
                              f"({self.num_perm})")

    @classmethod
    def from_settings(cls, settings: Settings) -> SignatureParams:
        return cls(shingle_size=settings.shingle_size, num_perm=settings.num_perm,
                   seed=settings.minhash_seed, scheme=settings.minhash_scheme,
                   bands=settings.lsh_bands, rows=settings.lsh_rows)

    @property
    def width(self) -> int:
        return _WIDTHS[self.scheme]

    @property
    def dtype(self) -> type[np.unsignedinteger[Any]]:
        return _DTYPES[self.scheme]

    @property
    def signature_token(self) -> str:
        return (f"lfsig1:hash={self.hash_name}:shingle={self.shingle_size}:scheme={self.scheme}"
                f":perm={self.num_perm}:seed={self.seed}")

    @property
    def band_token(self) -> str:
        return f"{self.signature_token}:bands={self.bands}x{self.rows}"

    def __str__(self) -> str:
        return self.band_token

    @classmethod
    def parse(cls, token: str) -> SignatureParams:
        """Inverse of ``band_token`` / ``signature_token`` (banding defaults when absent)."""
        match = _TOKEN_RE.match(token)
        if not match:
            raise SignatureError(f"not a signature parameter record: {token!r}")
        g = match.groupdict()
        extra = {"bands": int(g["bands"]), "rows": int(g["rows"])} if g["bands"] else {}
        try:
            return cls(shingle_size=int(g["shingle"]), num_perm=int(g["perm"]), seed=int(g["seed"]),
                       scheme=g["scheme"], hash_name=g["hash"], **extra)
        except ConfigError as exc:
            raise SignatureError(f"unusable signature parameter record {token!r}: {exc}") from None


_PERM_CACHE: dict[tuple[str, int, int], tuple[np.ndarray, np.ndarray]] = {}


def permutations(params: SignatureParams) -> tuple[np.ndarray, np.ndarray]:
    """The ``(a, b)`` arrays, drawn exactly as datasketch 2.x's ``MinHash._init_permutations``."""
    key = (params.scheme, params.num_perm, params.seed)
    if key not in _PERM_CACHE:
        gen = np.random.RandomState(params.seed)
        width, dtype = params.width, params.dtype
        a = gen.randint(0, 1 << (width - 1), params.num_perm, dtype=dtype) * dtype(2) + dtype(1)
        b = gen.randint(0, 1 << width, params.num_perm, dtype=dtype)
        a.setflags(write=False)
        b.setflags(write=False)
        _PERM_CACHE[key] = (a, b)
    return _PERM_CACHE[key]


def empty_value(params: SignatureParams) -> int:
    """The value of every position of an empty set's signature (datasketch's initial hash values)."""
    return (1 << params.width) - 1


def minhash_signatures(values: np.ndarray, offsets: np.ndarray, params: SignatureParams) -> np.ndarray:
    """Signatures of many sets given as one flat hash array with CSR ``offsets``; shape (n, num_perm).

    Set ``i`` is ``values[offsets[i]:offsets[i+1]]`` (repeats allowed). ``values`` must already be
    ``width``-bit shingle hashes. Work is done in chunks of values that may cut through a document; the
    partial minima of a cut document are combined, so a huge document needs no special case.
    """
    dtype = params.dtype
    values = np.asarray(values)
    if values.dtype != dtype:
        if values.size and (values.dtype.kind not in "ui" or int(values.max()) > empty_value(params)
                            or int(values.min()) < 0):
            raise ValueError(f"shingle hashes do not fit the {params.width}-bit scheme {params.scheme}")
        values = values.astype(dtype)
    offsets = np.asarray(offsets, dtype=np.int64)
    n_docs = len(offsets) - 1
    a, b = permutations(params)
    sig = np.full((n_docs, params.num_perm), empty_value(params), dtype=dtype)
    starts, ends = offsets[:-1], offsets[1:]
    nonempty = np.flatnonzero(ends > starts)
    ne_starts, ne_ends = starts[nonempty], ends[nonempty]
    total = len(values)
    tmp = np.empty(min(total, CHUNK_VALUES), dtype=dtype)
    for lo in range(0, total, CHUNK_VALUES):
        hi = min(lo + CHUNK_VALUES, total)
        first = np.searchsorted(ne_ends, lo, side="right")
        last = np.searchsorted(ne_starts, hi, side="left")
        docs = nonempty[first:last]
        seg = np.maximum(ne_starts[first:last], lo) - lo
        mixed = _fmix(values[lo:hi], params.width)
        buf = tmp[:hi - lo]
        for k in range(params.num_perm):
            np.multiply(mixed, a[k], out=buf)
            np.add(buf, b[k], out=buf)
            part = np.minimum.reduceat(buf, seg)
            sig[docs, k] = np.minimum(sig[docs, k], part)
    return sig


def signatures_from_texts(texts: Iterable[str], params: SignatureParams, *, batch_size: int = 2000,
                          hasher: WordHasher | None = None, progress: Progress = SILENT) -> np.ndarray:
    """End to end: texts → normalised words → shingle hashes → signatures, ``batch_size`` texts at a time."""
    hasher = hasher or WordHasher()
    texts = list(texts)
    out = np.empty((len(texts), params.num_perm), dtype=params.dtype)
    progress.start("signing", len(texts))
    for lo in range(0, len(texts), batch_size):
        chunk = texts[lo:lo + batch_size]
        values, offsets = batch_shingle_hashes(chunk, params.shingle_size, width=params.width, hasher=hasher)
        out[lo:lo + len(chunk)] = minhash_signatures(values, offsets, params)
        progress.advance(len(chunk))
    progress.finish()
    return out


def empty_rows(signatures: np.ndarray, params: SignatureParams) -> np.ndarray:
    """Boolean mask of signatures of empty sets, which must never become candidates of one another."""
    return np.all(signatures == empty_value(params), axis=1)


def signature_to_bytes(signature: np.ndarray, params: SignatureParams) -> bytes:
    """Little-endian fixed-width values, ``num_perm × width/8`` bytes; the record says how to read it."""
    sig = np.asarray(signature)
    if sig.shape != (params.num_perm,):
        raise SignatureError(f"signature has shape {sig.shape}, parameters say ({params.num_perm},)")
    return sig.astype(np.dtype(params.dtype).newbyteorder("<"), copy=False).tobytes()


def signature_from_bytes(data: bytes, params: SignatureParams) -> np.ndarray:
    expected = params.num_perm * params.width // 8
    if len(data) != expected:
        raise SignatureError(f"stored signature is {len(data)} bytes; {params.signature_token} needs {expected}")
    return np.frombuffer(data, dtype=np.dtype(params.dtype).newbyteorder("<")).astype(params.dtype)


def estimate_jaccard(signatures: np.ndarray, pairs: np.ndarray, *, chunk: int = 65536) -> np.ndarray:
    """Fraction of equal positions for each row pair ``(i, j)`` of ``pairs``; the MinHash estimator.

    Broder (1997): for a random min-wise permutation, P[min π(A) = min π(B)] = J(A, B); the mean over
    k permutations has standard error sqrt(J(1 − J) / k).
    """
    pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    out = np.empty(len(pairs), dtype=np.float64)
    k = signatures.shape[1]
    for lo in range(0, len(pairs), chunk):
        p = pairs[lo:lo + chunk]
        out[lo:lo + len(p)] = np.count_nonzero(signatures[p[:, 0]] == signatures[p[:, 1]], axis=1) / k
    return out
