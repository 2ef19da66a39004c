"""Deterministic random numbers addressed by absolute position.

Every random quantity of a scenario (noise samples, impact jitter, dropout runs, phases) is a pure
function of the scenario seed, a stream name and an absolute index (a sample number, an impact number,
a second). Numbers are drawn in fixed-size blocks, each from its own generator seeded with
``(seed, crc32(stream name), block index)`` through :class:`numpy.random.SeedSequence`, so any slice can
be produced without drawing what comes before it. That is what makes a render at day 29 cheap and a
stream cut into chunks identical to one long render.
"""

from __future__ import annotations

import zlib
from functools import lru_cache

import numpy as np

NOISE_BLOCK = 1 << 16  # samples per noise block


def stream_key(*parts: str) -> int:
    """A stable 32-bit key for a stream name such as ``("noise", "de-h")``."""
    return zlib.crc32("/".join(parts).encode("utf-8"))


def generator(seed: int, key: int, index: int = 0) -> np.random.Generator:
    """The generator of block ``index`` (any integer, negative too) of stream ``key``."""
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence([seed, key, index % (1 << 63)])))


@lru_cache(maxsize=64)
def _noise_block(seed: int, key: int, index: int) -> np.ndarray:
    block = generator(seed, key, index).standard_normal(NOISE_BLOCK)
    block.flags.writeable = False
    return block


def white_noise(seed: int, key: int, n0: int, n: int) -> np.ndarray:
    """Unit-variance Gaussian samples ``n0 .. n0+n-1`` of stream ``key`` (a fresh array)."""
    out = np.empty(n)
    pos = 0
    while pos < n:
        b, off = divmod(n0 + pos, NOISE_BLOCK)
        take = min(NOISE_BLOCK - off, n - pos)
        out[pos:pos + take] = _noise_block(seed, key, b)[off:off + take]
        pos += take
    return out
