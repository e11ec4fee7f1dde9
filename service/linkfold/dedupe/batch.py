"""MinHash signatures of a batch of texts as one pure task, for the executor.

Shingling and signing are pure and CPU-bound: a worker gets the parameters and the texts by value and
returns one signature per text in the stored byte form (``signature_to_bytes``), so what comes back is
what the coordinating process writes, whichever process computed it.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .minhash import SignatureParams, signature_to_bytes, signatures_from_texts


def signature_batch(job: tuple[SignatureParams, Sequence[str]]) -> list[bytes]:
    """``(parameters, texts)`` → the stored bytes of each text's signature, in order."""
    params, texts = job
    signatures = signatures_from_texts(texts, params)
    return [signature_to_bytes(row, params) for row in signatures]


def signature_rows(job: tuple[SignatureParams, Sequence[str]]) -> np.ndarray:
    """``(parameters, texts)`` → one signature per text as rows of an array (what the stage bands)."""
    params, texts = job
    return signatures_from_texts(texts, params)
