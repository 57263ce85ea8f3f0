"""Per-procedure random seeds derived from the spec's master seed.

Every random procedure (a bootstrap, a wild bootstrap, ...) draws from its own
generator, seeded by hashing the master seed with the procedure's name. Adding or
removing one procedure therefore never changes another's draws, and the seed each one
used is recorded in results.json so that a data editor can re-run it alone.
"""

from __future__ import annotations

import hashlib

import numpy as np


def derive_seed(master: int, name: str) -> int:
    """A 63-bit seed for procedure ``name``: SHA-256 of 'master:name', first 8 bytes."""
    digest = hashlib.sha256(f"{int(master)}:{name}".encode()).digest()
    return int.from_bytes(digest[:8], "big") >> 1


def generator(master: int, name: str) -> np.random.Generator:
    """numpy's PCG64 generator for procedure ``name``."""
    return np.random.default_rng(derive_seed(master, name))
