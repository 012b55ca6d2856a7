"""Seeds that depend on what is computed, never on job order or chunking."""

import hashlib


def derive_seed(global_seed: int, *keys) -> int:
    """A 63-bit seed from the run's seed and any keys (tree index, analysis, model...).

    SHA-256 of the joined keys, so the value is the same on every platform and
    Python version (the built-in ``hash`` of a string is salted per process).
    """
    text = "\x1f".join([str(int(global_seed))] + [str(k) for k in keys])
    return int.from_bytes(hashlib.sha256(text.encode()).digest()[:8], "little") >> 1
