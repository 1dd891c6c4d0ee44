"""Generation: profile -> plan -> one streaming pipeline -> samples.

Modules (import them directly; this package imports nothing):

- :mod:`~vibsynth.generate.seeds`: the root ``SeedSequence`` and per-frame children;
- :mod:`~vibsynth.generate.plan`: :class:`SynthesisPlan` (pure data) and :func:`plan_synthesis`
  (frame length, resolution, periodic vs overlap-add from the options, quantities);
- :mod:`~vibsynth.generate.frames`: line amplitudes, random-phase frames, sine window, ramps;
- :mod:`~vibsynth.generate.highpass`: the spill-over high-pass and the ways it is applied;
- :mod:`~vibsynth.generate.design`: a non-Gaussian drive's transform and pre-compensated
  spectrum on the plan's grid (the only module that calls :mod:`vibsynth.transforms`' design code);
- :mod:`~vibsynth.generate.pipeline`: the one streaming pipeline (:class:`Synthesizer`),
  :func:`generate_samples` and :func:`iter_chunks`;
- ``_threads``, ``_memory``: private plumbing (ordered thread-pool map, worker counts, machine memory).
"""
