"""Seeds: the root :class:`numpy.random.SeedSequence` of a record and its per-frame children.

Overlap-add frame ``j`` draws from the child ``spawn_key + (0, j)``, a periodic
record from ``spawn_key + (1,)``; every child is a PCG64 generator, so any
frame can be made alone and in any order.

References
----------
NumPy ``SeedSequence`` (O'Neill's seed mixing) and its ``spawn_key`` children.
"""

from __future__ import annotations

import numpy as np

from vibsynth.errors import InputError

#: spawn-key prefix of overlap-add frames (frame j: ``(FRAME_STREAM, j)``).
FRAME_STREAM = 0
#: spawn-key of a periodic record: ``(PERIODIC_STREAM,)``.
PERIODIC_STREAM = 1


def root_seed_sequence(seed) -> np.random.SeedSequence:
    """The root :class:`numpy.random.SeedSequence` of a record.

    Parameters
    ----------
    seed : int, numpy.random.SeedSequence or numpy.random.Generator
        An int (>= 0) is the entropy of the root sequence; a ``SeedSequence``
        is used as it is; a ``Generator`` gives one integer in ``[0, 2**53)``
        (advancing it) which becomes the entropy, so the record can be remade
        from :func:`seed_entropy` of the result.

    Returns
    -------
    numpy.random.SeedSequence

    Examples
    --------
    >>> root_seed_sequence(42).entropy
    42

    References
    ----------
    NumPy ``SeedSequence`` (O'Neill's seed mixing) and its ``spawn_key`` children.
    """
    if isinstance(seed, np.random.SeedSequence):
        return seed
    if isinstance(seed, np.random.Generator):
        return np.random.SeedSequence(int(seed.integers(0, 2**53)))
    if isinstance(seed, (bool, np.bool_)) or seed is None:
        raise InputError(f"seed {seed!r} must be an integer >= 0, a SeedSequence or a numpy Generator", "seed")
    try:
        value = int(seed)
    except (TypeError, ValueError):
        raise InputError(f"seed {seed!r} must be an integer >= 0, a SeedSequence or a numpy Generator", "seed") from None
    if value != seed or value < 0:
        raise InputError(f"seed {seed!r} must be an integer >= 0", "seed")
    return np.random.SeedSequence(value)


def seed_entropy(sequence: np.random.SeedSequence) -> int:
    """The integer entropy of a root seed sequence (what a sidecar records as ``seed``).

    Examples
    --------
    >>> seed_entropy(root_seed_sequence(42))
    42

    References
    ----------
    See the module docstring.
    """
    entropy = sequence.entropy
    if isinstance(entropy, (list, tuple, np.ndarray)):
        raise InputError("a seed sequence with a list of entropy words cannot be recorded as one seed; pass an int", "seed")
    return int(entropy)




def child_generator(root: np.random.SeedSequence, *key: int) -> np.random.Generator:
    """The PCG64 generator of the child ``root.spawn_key + key`` of a root seed sequence.

    Parameters
    ----------
    root : numpy.random.SeedSequence
        From :func:`root_seed_sequence`.
    *key : int
        ``(FRAME_STREAM, j)`` for overlap-add frame j, ``(PERIODIC_STREAM,)`` for a periodic record.

    Returns
    -------
    numpy.random.Generator

    Examples
    --------
    >>> root = root_seed_sequence(7)
    >>> a = child_generator(root, FRAME_STREAM, 3).standard_normal()
    >>> a == child_generator(root_seed_sequence(7), FRAME_STREAM, 3).standard_normal()
    True

    References
    ----------
    NumPy ``SeedSequence`` ``spawn_key`` children.
    """
    sequence = np.random.SeedSequence(root.entropy, spawn_key=tuple(root.spawn_key) + tuple(key))
    return np.random.default_rng(sequence)
