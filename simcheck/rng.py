"""Random streams per Scientific Python SPEC 7.

Every function that draws takes ``rng``: an int seed, a
:class:`numpy.random.SeedSequence` or a :class:`numpy.random.Generator`
(``None`` means fresh OS entropy). Nothing here touches global state.

All streams of one computation derive from one root SeedSequence by
*explicit* spawn keys (not by the stateful ``SeedSequence.spawn``), so the
stream of block ``i`` of stage ``s`` of cell ``c`` is a pure function of the
root and ``(c, s, i)``. Replicates are grouped in fixed blocks that each own
one stream; chunks and workers only group blocks, so results do not depend on
chunk size or worker count.
"""

from __future__ import annotations

import hashlib
from typing import Union

import numpy as np

RngLike = Union[int, np.random.SeedSequence, np.random.Generator, None]

# Stage keys: independent purposes never share a stream.
STAGE_MAIN = 0
STAGE_GROUP_B = 1
STAGE_CONFIRM = 2
STAGE_BOOTSTRAP = 3
STAGE_POPULATION = 4
STAGE_PLANNING = 5  # planning values drawn per replicate block (simcheck.uncertain)


def root_sequence(rng: RngLike) -> tuple[np.random.SeedSequence, int | None]:
    """Return the root SeedSequence for ``rng`` and the int seed if there is one.

    A Generator contributes fresh entropy drawn from itself, so two calls with
    the same Generator give different, reproducible results (SPEC 7).
    """
    if isinstance(rng, (bool, np.bool_)):
        raise TypeError("rng must be an int, SeedSequence or Generator, not a bool")
    if rng is None:
        ss = np.random.SeedSequence()
        return ss, None
    if isinstance(rng, (int, np.integer)):
        if rng < 0:
            raise ValueError("rng: a seed must be >= 0")
        return np.random.SeedSequence(int(rng)), int(rng)
    if isinstance(rng, np.random.SeedSequence):
        seed = rng.entropy if isinstance(rng.entropy, int) and not rng.spawn_key else None
        return rng, seed
    if isinstance(rng, np.random.Generator):
        entropy = [int(v) for v in rng.integers(0, 2**63, size=4, dtype=np.int64)]
        return np.random.SeedSequence(entropy), None
    raise TypeError(f"rng must be an int, SeedSequence or Generator, got {type(rng).__name__}")


def child(root: np.random.SeedSequence, *key: int) -> np.random.SeedSequence:
    """The SeedSequence at spawn key ``root.spawn_key + key`` (stateless)."""
    return np.random.SeedSequence(
        entropy=root.entropy,
        spawn_key=tuple(root.spawn_key) + tuple(int(k) for k in key),
        pool_size=root.pool_size,
    )


def generator(root: np.random.SeedSequence, *key: int) -> np.random.Generator:
    """A PCG64 Generator for the stream at ``key`` below ``root``."""
    return np.random.Generator(np.random.PCG64(child(root, *key)))


def key_from_text(text: str) -> int:
    """A stable 63-bit spawn-key element from text (e.g. a sweep cell hash)."""
    return int.from_bytes(hashlib.sha256(text.encode("utf-8")).digest()[:8], "big") >> 1


def blocks(total: int, block: int) -> list[tuple[int, int]]:
    """Split ``total`` replicates into consecutive ``(start, stop)`` blocks."""
    if total < 0 or block < 1:
        raise ValueError("blocks: total >= 0 and block >= 1 required")
    return [(s, min(s + block, total)) for s in range(0, total, block)]
