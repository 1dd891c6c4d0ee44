"""Analysis: streaming Welch estimates, amplitude statistics, peak theory, the verifier and its figures.

Independent of the generator by rule: nothing here imports :mod:`vibsynth.generate` or
:mod:`vibsynth.transforms` (a test checks it in a fresh interpreter), so a generator defect shows up
as a failed verification instead of being shared by both sides.
"""
