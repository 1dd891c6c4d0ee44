"""Memoryless non-Gaussian transforms behind one Protocol (:mod:`.base`): cubic Hermite
(:mod:`.hermite`), clipping (:mod:`.clipping`), their choice from a target (:mod:`.choice`), and the
spectral pre-compensation that keeps the ASD on target (:mod:`.compensation`).

Transforms never import :mod:`vibsynth.generate`: the pipeline calls a transform, not the reverse.
"""
