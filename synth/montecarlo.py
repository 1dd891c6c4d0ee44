"""Monte-Carlo records: record ``i`` of a plan from spawn key ``i``, made here or on workers, same numbers.

One engine for every Monte-Carlo of the package (the peaks of
:mod:`vibsynth.peaks`, the damage scatter of
:mod:`vibsynth.durability.scatter`): record ``i`` is synthesized by
:class:`vibsynth.generate.pipeline.Synthesizer`, exactly as a drive file is,
from ``SeedSequence(entropy, spawn_key=(i,))`` with ``entropy`` the root
seed's (:func:`vibsynth.generate.seeds.seed_entropy`).  A record's figures
depend only on ``(plan, entropy, i)``, so :func:`map_records` may run the
records one after another in this process or spread over the workers of a
``mapper`` (e.g. :class:`vibsynth.batch.dask_mapper`), in blocks of
consecutive indices, and gives the same results, number for number.

References
----------
NumPy ``SeedSequence`` (O'Neill's seed mixing, PCG64 children); Monte-Carlo
simulation by spectral representation (M. Shinozuka and C.-M. Jan, "Digital
simulation of random processes and its applications", J. Sound Vib. 25(1),
111-128, 1972).
"""

from __future__ import annotations

import functools
from typing import Callable, Iterator

import numpy as np

__all__ = ["record_seed", "record_synthesizer", "record_samples", "map_records", "CHUNK_SAMPLES"]

#: Samples per chunk a record is read in by the Monte-Carlo functions (fixed: the results must not
#: depend on where the record is made, and streamed sums depend on the chunking).
CHUNK_SAMPLES = 1 << 16


def record_seed(entropy: int, index: int) -> np.random.SeedSequence:
    """The seed sequence of Monte-Carlo record ``index``: ``SeedSequence(entropy, spawn_key=(index,))``.

    Parameters
    ----------
    entropy : int
        Root entropy (``seed_entropy(root_seed_sequence(seed))``; for a seed N >= 0 it is N).
    index : int
        Record number, from 0.

    Returns
    -------
    numpy.random.SeedSequence

    Examples
    --------
    >>> record_seed(3, 2).spawn_key
    (2,)

    References
    ----------
    NumPy ``SeedSequence`` (spawn keys give independent streams).
    """
    return np.random.SeedSequence(int(entropy), spawn_key=(int(index),))


def record_synthesizer(plan, entropy: int, index: int):
    """The synthesizer of record ``index`` (single-threaded: a Monte-Carlo runs its parallelism over records).

    Parameters
    ----------
    plan : vibsynth.generate.plan.SynthesisPlan
        The records' plan (duration, rate, line spectrum).
    entropy : int
        Root entropy, see :func:`record_seed`.
    index : int
        Record number, from 0.

    Returns
    -------
    vibsynth.generate.pipeline.Synthesizer

    Examples
    --------
    >>> from vibsynth.generate.plan import make_plan
    >>> from vibsynth.profile.asd import AsdProfile
    >>> plan = make_plan(AsdProfile([20, 500], [0.01, 0.01]), 1.0, 2048.0)
    >>> record_synthesizer(plan, 1, 0).samples().shape
    (2048, 1)

    References
    ----------
    See :class:`vibsynth.generate.pipeline.Synthesizer`.
    """
    from vibsynth.generate.pipeline import Synthesizer

    return Synthesizer(plan, record_seed(entropy, index))


def record_samples(plan, seed, index: int) -> np.ndarray:
    """The samples of Monte-Carlo record ``index`` (first column, g), as the Monte-Carlo saw them.

    For checks outside the package: the record whose damage or peak a report
    lists can be remade and analysed independently.

    Parameters
    ----------
    plan : vibsynth.generate.plan.SynthesisPlan
        The records' plan.
    seed : int
        Root seed of the Monte-Carlo (>= 0), as given to the report.
    index : int
        Record number, from 0.

    Returns
    -------
    numpy.ndarray
        Base acceleration, g, shape ``(plan.total_samples,)``.

    Examples
    --------
    >>> from vibsynth.generate.plan import make_plan
    >>> from vibsynth.profile.asd import AsdProfile
    >>> plan = make_plan(AsdProfile([20, 500], [0.01, 0.01]), 1.0, 2048.0)
    >>> bool((record_samples(plan, 5, 1) == record_samples(plan, 5, 1)).all())
    True

    References
    ----------
    See :func:`record_seed`.
    """
    from vibsynth.generate.seeds import root_seed_sequence, seed_entropy

    entropy = seed_entropy(root_seed_sequence(seed))
    synthesizer = record_synthesizer(plan, entropy, index)
    return np.concatenate([chunk[:, 0] for chunk in synthesizer.iter_chunks(CHUNK_SAMPLES)])


def _run_block(function: Callable, indices) -> list:
    """``function(i)`` for each record index of a block (one task of a parallel Monte-Carlo)."""
    return [function(index) for index in indices]


def map_records(function: Callable[[int], object], records: int, mapper=None) -> Iterator:
    """``function(i)`` for ``i = 0 .. records - 1``, yielded in order: here, or on a mapper's workers.

    Parameters
    ----------
    function : callable
        Called with a record index; must depend on nothing else that differs
        between processes (picklable when ``mapper`` is given).
    records : int
        Number of records.
    mapper : callable, optional
        ``mapper(function, blocks)`` yielding the results over blocks of
        indices in order (e.g. :class:`vibsynth.batch.dask_mapper`); its
        ``block_records`` attribute (default 1) sets the records per block.
        Default: one record after another in this process.

    Yields
    ------
    object
        ``function(i)``, in order of ``i``.

    Examples
    --------
    >>> list(map_records(lambda i: i * i, 4))
    [0, 1, 4, 9]
    >>> list(map_records(lambda i: i * i, 4, mapper=lambda f, blocks: map(f, blocks)))
    [0, 1, 4, 9]

    References
    ----------
    None (ordered map over blocks).
    """
    count = int(records)
    if mapper is None:
        for index in range(count):
            yield function(index)
        return
    size = max(1, int(getattr(mapper, "block_records", 1)))
    blocks = [range(start, min(start + size, count)) for start in range(0, count, size)]
    for block in mapper(functools.partial(_run_block, function), blocks):
        yield from block
