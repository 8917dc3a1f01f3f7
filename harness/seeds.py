"""The one place random streams come from: a root seed plus stable labels give a numpy Generator.

Labels are hashed with SHA-256 (not Python's salted hash), so streams are the same in every
process, run and machine.
"""

from __future__ import annotations

import hashlib

import numpy as np

__all__ = ["label_int", "rng_for"]


def label_int(label):
    """A stable 32-bit integer for any label (text or integer)."""
    return int.from_bytes(hashlib.sha256(str(label).encode()).digest()[:4], "little")


def rng_for(seed, *labels):
    """Independent generator for (seed, labels...); the same inputs always give the same stream."""
    return np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=tuple(label_int(x) for x in labels)))
