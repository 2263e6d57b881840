"""Seeds derived from one master seed and a name, never from execution order.

>>> derive_seed(20261202, "grow_forest", 3) == derive_seed(20261202, "grow_forest", 3)
True
"""

from __future__ import annotations

import hashlib

import numpy as np


def _name_words(name: str) -> list[int]:
    digest = hashlib.sha256(name.encode("utf-8")).digest()
    return [int.from_bytes(digest[i : i + 4], "little") for i in range(0, 16, 4)]


def seed_sequence(master: int, *names: str | int) -> np.random.SeedSequence:
    """A SeedSequence keyed by the master seed and a path of names / indices."""
    key: list[int] = []
    for part in names:
        if isinstance(part, (int, np.integer)) and not isinstance(part, bool):
            key.append(int(part))
        else:
            key.extend(_name_words(str(part)))
    return np.random.SeedSequence(entropy=int(master), spawn_key=tuple(key))


def derive_seed(master: int, *names: str | int) -> int:
    """A 32-bit integer seed for the job or tree called ``names`` under ``master``."""
    return int(seed_sequence(master, *names).generate_state(1, dtype=np.uint32)[0])


def generator(master: int, *names: str | int) -> np.random.Generator:
    """A numpy Generator for the job or tree called ``names`` under ``master``."""
    return np.random.default_rng(seed_sequence(master, *names))
