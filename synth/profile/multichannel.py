"""Multi-channel profiles: one ASD per channel and a coherence and phase for pairs of channels.

TOML form (vibsynth's own)::

    name = "three-axis-mount"
    description = "Invented demo: ..."

    [[channels]]
    name = "x"
    profile = "bench-flat"          # a preset name, or a profile file (relative to this file)

    [[channels]]
    name = "y"                      # or an inline table, as in a single-channel profile
    [[channels.breakpoints]]
    frequency = 20.0
    asd = 0.005
    [[channels.breakpoints]]
    frequency = 2000.0
    asd = 0.005

    [[pairs]]
    channels = ["x", "y"]
    coherence = 0.8                 # ordinary (magnitude-squared) coherence, 0..1
    phase_deg = 0.0                 # angle of G_xy = E[conj(X) Y], as scipy.signal.csd(x, y)

    [[pairs]]
    channels = ["x", "z"]
    [[pairs.breakpoints]]
    frequency = 20.0
    coherence = 0.9
    phase_deg = 0.0
    [[pairs.breakpoints]]
    frequency = 500.0
    coherence = 0.2
    phase_deg = 45.0

``coherence`` is the ordinary coherence function
``gamma^2_ab(f) = |G_ab|^2 / (G_aa G_bb)`` (what ``scipy.signal.coherence``
estimates); ``phase_deg`` is the angle of ``G_ab = E[conj(A) B]`` (positive:
the second channel leads the first).  Between breakpoints both are
interpolated linearly in log frequency; beyond the first and last breakpoint
they stay constant.  Pairs not given are incoherent.  The spectral density
matrix at frequency f is then
``G_ab(f) = sqrt(gamma^2_ab G_aa G_bb) exp(i phase_ab)``; it must be positive
semidefinite at every frequency (checked by :meth:`MultiChannelProfile.check_psd`
on the coherence matrix, whose diagonal is 1 and whose positive
semidefiniteness is that of G).  :meth:`MultiChannelProfile.repaired` gives
the nearest valid coherence matrices (eigenvalue clipping, Higham 1988, then
unit diagonal restored) and says how far each moved.

References
----------
Bendat, J. S. & Piersol, A. G., *Random Data*, 4th ed., Wiley 2010, ch. 5 and 7
(cross-spectral density, coherence function, spectral density matrix).
Higham, N. J., "Computing a nearest symmetric positive semidefinite matrix",
Linear Algebra and its Applications 103, 1988, pp. 103-118.
"""

from __future__ import annotations

import math
import os
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from vibsynth.errors import InputError
from vibsynth.profile.asd import AsdProfile

_TOP_KEYS = ("name", "description", "notes", "channels", "pairs", "repair")
_CHANNEL_KEYS = ("name", "profile", "description", "unit", "level_db", "grms", "breakpoints")
_PAIR_KEYS = ("channels", "coherence", "phase_deg", "breakpoints")
_PAIR_POINT_KEYS = ("frequency", "coherence", "phase_deg")

#: Smallest eigenvalue of a coherence matrix (unit diagonal) still counted as positive semidefinite:
#: rounding of the interpolation and the square roots, not a tolerance on the user's numbers.
PSD_TOLERANCE = 1e-9

#: An eigenvalue below this fraction of the largest marks a line as only semidefinite
#: (factored by its eigen-decomposition instead of Cholesky).
DEFINITE_FRACTION = 1e-10

#: Points of the logarithmic grid :meth:`MultiChannelProfile.check_psd` adds to the breakpoints.
CHECK_GRID_POINTS = 2048


@dataclass(frozen=True)
class ChannelPair:
    """Coherence and phase of one pair of channels.

    Parameters
    ----------
    first, second : int
        Channel indices (``first < second`` is not required; the phase is that of
        ``G_first,second``).
    frequencies_hz : numpy.ndarray
        Breakpoint frequencies, Hz (one value for a constant pair).
    coherence : numpy.ndarray
        Ordinary coherence at each breakpoint, 0..1.
    phase_deg : numpy.ndarray
        Angle of ``G_first,second = E[conj(A) B]`` at each breakpoint, degrees.

    Examples
    --------
    >>> pair = ChannelPair(0, 1, np.array([10.0, 1000.0]), np.array([1.0, 0.0]), np.array([0.0, 90.0]))
    >>> [round(float(v), 3) for v in pair.coherence_at([1.0, 100.0, 1e4])]
    [1.0, 0.5, 0.0]

    References
    ----------
    Bendat & Piersol (2010), the coherence function (ch. 5).
    """

    first: int
    second: int
    frequencies_hz: np.ndarray
    coherence: np.ndarray
    phase_deg: np.ndarray

    def _interpolate(self, values: np.ndarray, frequency_hz) -> np.ndarray:
        f = np.asarray(frequency_hz, dtype=float)
        if self.frequencies_hz.size == 1:
            return np.full(f.shape, float(values[0]))
        with np.errstate(divide="ignore"):
            x = np.log(np.maximum(f, 1e-300))
        return np.interp(x, np.log(self.frequencies_hz), values)

    def coherence_at(self, frequency_hz) -> np.ndarray:
        """Ordinary coherence (0..1) at the given frequencies (Hz): log-frequency interpolation, constant beyond the ends.

        Examples
        --------
        See the class docstring.

        References
        ----------
        Bendat & Piersol (2010), the coherence function.
        """
        return self._interpolate(self.coherence, frequency_hz)

    def phase_deg_at(self, frequency_hz) -> np.ndarray:
        """Phase of ``G_first,second`` (degrees) at the given frequencies (Hz), interpolated as the coherence.

        Examples
        --------
        >>> pair = ChannelPair(0, 1, np.array([10.0, 1000.0]), np.array([1.0, 0.0]), np.array([0.0, 90.0]))
        >>> [round(float(v), 3) for v in pair.phase_deg_at([100.0])]
        [45.0]

        References
        ----------
        Bendat & Piersol (2010), phase of the cross-spectral density.
        """
        return self._interpolate(self.phase_deg, frequency_hz)


@dataclass(frozen=True)
class PsdViolation:
    """Where a spectral density matrix is not positive semidefinite (the worst line found).

    Attributes
    ----------
    frequency_hz : float
        Frequency of the most negative eigenvalue, Hz.
    channels : tuple of str
        Channels that carry that eigenvector (weight >= 5 %).
    smallest_eigenvalue : float
        Of the coherence matrix (unit diagonal), dimensionless.
    lines : int
        Number of checked frequencies that fail.

    Examples
    --------
    >>> PsdViolation(100.0, ("x", "y"), -0.2, 3).message()[:60]
    'the spectral density matrix is not positive semidefinite at '

    References
    ----------
    Bendat & Piersol (2010): a spectral density matrix is Hermitian positive semidefinite.
    """

    frequency_hz: float
    channels: tuple
    smallest_eigenvalue: float
    lines: int

    def message(self) -> str:
        """The one-line description used in errors (see the class docstring for an example)."""
        return (
            f"the spectral density matrix is not positive semidefinite at {self.frequency_hz:.6g} Hz "
            f"(channels {', '.join(self.channels)}): smallest eigenvalue of the coherence matrix "
            f"{self.smallest_eigenvalue:.4g} (must be >= 0; it fails at {self.lines} of the checked frequencies); lower the "
            "coherence of those pairs or make their phases consistent (phase_ab + phase_bc = phase_ac), or see "
            "'vibsynth info --repair'"
        )


@dataclass(frozen=True)
class MultiChannelProfile:
    """Named channels, each with its ASD (g^2/Hz), and coherence/phase for pairs of channels.

    Parameters
    ----------
    channel_names : tuple of str
        Unique channel names (file columns are named after them).
    channels : tuple of AsdProfile
        One ASD profile per channel.
    pairs : tuple of ChannelPair
        Specified pairs (the others are incoherent).
    name, description, source : str
    repair : bool
        Generate from the nearest valid coherence matrices where the given ones
        are not positive semidefinite (see :meth:`repaired`).

    Examples
    --------
    >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
    >>> profile = MultiChannelProfile(("x", "y"), (flat, flat),
    ...     (ChannelPair(0, 1, np.array([1.0]), np.array([0.5]), np.array([90.0])),))
    >>> matrix = profile.matrix([100.0])[0]
    >>> round(float(abs(matrix[0, 1]) ** 2 / (matrix[0, 0] * matrix[1, 1]).real), 6), round(float(np.angle(matrix[0, 1], deg=True)), 6)
    (0.5, 90.0)

    References
    ----------
    Bendat & Piersol (2010), spectral density matrix; Higham (1988).
    """

    channel_names: tuple
    channels: tuple
    pairs: tuple = ()
    name: str = "multi-channel"
    description: str = ""
    source: str = field(default="", compare=False)
    repair: bool = False

    def __post_init__(self):
        names = tuple(str(n) for n in self.channel_names)
        where = self.source or self.name
        if len(names) != len(self.channels) or not names:
            raise InputError(f"{len(names)} channel names for {len(self.channels)} channels", where, "channels")
        if len(set(names)) != len(names):
            raise InputError(f"channel names {names!r} must be unique", where, "channels")
        seen = set()
        for pair in self.pairs:
            key = tuple(sorted((pair.first, pair.second)))
            if pair.first == pair.second or key in seen or max(key) >= len(names) or min(key) < 0:
                raise InputError(f"pair ({pair.first}, {pair.second}) is repeated or names no two channels", where, "pairs")
            seen.add(key)
        object.__setattr__(self, "channel_names", names)
        object.__setattr__(self, "channels", tuple(self.channels))
        object.__setattr__(self, "pairs", tuple(self.pairs))

    # ------------------------------------------------------------ figures
    @property
    def channel_count(self) -> int:
        """Number of channels."""
        return len(self.channels)

    @property
    def frequency_min_hz(self) -> float:
        """Lowest frequency of any channel (Hz)."""
        return min(c.frequency_min_hz for c in self.channels)

    @property
    def frequency_max_hz(self) -> float:
        """Highest frequency of any channel (Hz)."""
        return max(c.frequency_max_hz for c in self.channels)

    def envelope(self) -> AsdProfile:
        """A single-channel profile for planning: the band of all channels and every channel's breakpoint.

        Its ASD at each breakpoint is the sum of the channels' there (the
        planner uses only its band and its narrowest segment; the record's
        lines come from the channels themselves).

        Examples
        --------
        >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
        >>> MultiChannelProfile(("x", "y"), (flat, AsdProfile([10, 500], [0.02, 0.02]))).envelope().frequencies_hz.tolist()
        [10.0, 20.0, 500.0, 2000.0]

        References
        ----------
        None (bookkeeping).
        """
        points = np.unique(np.concatenate([c.frequencies_hz for c in self.channels]))
        values = np.sum([c.evaluate(points) for c in self.channels], axis=0)
        values = np.maximum(values, 1e-300)
        return AsdProfile(points, values, name=self.name, description=self.description, source=self.source)

    def pair_of(self, first: int, second: int) -> ChannelPair | None:
        """The specified pair of two channel indices (either order), or None.

        Examples
        --------
        >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
        >>> MultiChannelProfile(("x", "y"), (flat, flat)).pair_of(1, 0) is None
        True

        References
        ----------
        None (bookkeeping).
        """
        for pair in self.pairs:
            if {pair.first, pair.second} == {first, second}:
                return pair
        return None

    # ------------------------------------------------------------ matrices
    def coherence_matrix(self, frequency_hz) -> np.ndarray:
        """Complex coherence matrices ``R_ab = sqrt(gamma^2_ab) exp(i phase_ab)`` (unit diagonal), shape (K, C, C).

        ``R_ab`` is ``G_ab / sqrt(G_aa G_bb)``: the spectral density matrix
        normalised by its diagonal.  Entry (a, b) is the expectation of
        ``conj(A) B`` (``G_ab`` as :func:`scipy.signal.csd` returns it); the
        matrix is Hermitian.

        Examples
        --------
        >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
        >>> MultiChannelProfile(("x",), (flat,)).coherence_matrix([100.0]).shape
        (1, 1, 1)

        References
        ----------
        Bendat & Piersol (2010), coherence function and cross-spectral density.
        """
        f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
        count = self.channel_count
        matrix = np.zeros((f.size, count, count), dtype=np.complex128)
        index = np.arange(count)
        matrix[:, index, index] = 1.0
        for pair in self.pairs:
            value = np.sqrt(np.clip(pair.coherence_at(f), 0.0, 1.0)) * np.exp(1j * np.deg2rad(pair.phase_deg_at(f)))
            matrix[:, pair.first, pair.second] = value
            matrix[:, pair.second, pair.first] = np.conj(value)
        if self.repair:
            matrix = nearest_coherence_matrix(matrix)[0]
        return matrix

    def matrix(self, frequency_hz, asd=None, coherence=None) -> np.ndarray:
        """Spectral density matrices ``G_ab(f)`` (g^2/Hz), shape (K, C, C); ``G_ab = E[conj(A) B]``.

        Parameters
        ----------
        frequency_hz : array_like
            Frequencies, Hz.
        asd : array_like, optional
            Channel ASDs at those frequencies, shape (C, K) (default: each
            channel's :meth:`AsdProfile.evaluate`).
        coherence : numpy.ndarray, optional
            :meth:`coherence_matrix` at those frequencies, if already computed
            (it is scaled in place).

        Returns
        -------
        numpy.ndarray, complex, shape (K, C, C)

        Examples
        --------
        See the class docstring.

        References
        ----------
        Bendat & Piersol (2010), spectral density matrix.
        """
        f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
        if asd is None:
            asd = np.array([c.evaluate(f) for c in self.channels])
        root = np.sqrt(np.asarray(asd, dtype=float)).T  # (K, C)
        matrix = self.coherence_matrix(f) if coherence is None else coherence
        matrix *= root[:, :, None]
        matrix *= root[:, None, :]
        return matrix

    def check_grid_hz(self) -> np.ndarray:
        """Frequencies :meth:`check_psd` examines: every breakpoint and a 2048-point log grid over the band (Hz).

        Examples
        --------
        >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
        >>> MultiChannelProfile(("x", "y"), (flat, flat)).check_grid_hz().size
        2048

        References
        ----------
        None (a sampling of the band dense against the breakpoint spacing).
        """
        points = [c.frequencies_hz for c in self.channels] + [p.frequencies_hz for p in self.pairs]
        grid = np.geomspace(self.frequency_min_hz, self.frequency_max_hz, CHECK_GRID_POINTS)
        return np.unique(np.concatenate(points + [grid]))

    def check_psd(self, frequency_hz=None, asd=None, coherence=None) -> PsdViolation | None:
        """The worst frequency where the matrix is not positive semidefinite, or None when it is everywhere.

        Only channels with a non-zero ASD at a frequency take part there (a
        channel outside its band has no row).

        Parameters
        ----------
        frequency_hz : array_like, optional
            Frequencies to check (default :meth:`check_grid_hz`).
        asd : array_like, optional
            Channel ASDs there, shape (C, K) (default from the channels).
        coherence : numpy.ndarray, optional
            :meth:`coherence_matrix` there, if already computed (not changed).

        Returns
        -------
        PsdViolation or None

        Examples
        --------
        >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
        >>> one = np.array([1.0])
        >>> bad = MultiChannelProfile(("x", "y", "z"), (flat, flat, flat), (ChannelPair(0, 1, one, one, 0 * one),
        ...     ChannelPair(1, 2, one, one, 0 * one), ChannelPair(0, 2, one, 0 * one, 0 * one)))
        >>> bad.check_psd().channels
        ('x', 'y', 'z')

        References
        ----------
        Bendat & Piersol (2010): a spectral density matrix is Hermitian positive semidefinite.
        """
        if self.channel_count < 2:
            return None
        f = self.check_grid_hz() if frequency_hz is None else np.atleast_1d(np.asarray(frequency_hz, dtype=float))
        if asd is None:
            asd = np.array([c.evaluate(f) for c in self.channels])
        matrix = _active_only(self.coherence_matrix(f) if coherence is None else coherence, np.asarray(asd) > 0)
        # Lines whose square-root-free Cholesky (LDL^H) has every pivot clearly > 0 are positive
        # definite; only the others need their eigenvalues.
        _, pivots = _ldl(matrix)
        doubtful = np.flatnonzero(np.min(pivots, axis=1) <= DEFINITE_FRACTION)
        if doubtful.size == 0:
            return None
        values, vectors = np.linalg.eigh(matrix[doubtful])
        smallest = values[:, 0]
        bad = smallest < -PSD_TOLERANCE
        if not np.any(bad):
            return None
        worst = int(np.argmin(smallest))
        weight = np.abs(vectors[worst, :, 0]) ** 2
        involved = tuple(n for n, w in zip(self.channel_names, weight) if w >= 0.05)
        return PsdViolation(float(f[doubtful[worst]]), involved, float(smallest[worst]), int(np.sum(bad)))

    def repaired(self) -> tuple["MultiChannelProfile", dict]:
        """This profile generating from the nearest valid coherence matrices, and how far they moved.

        The coherence matrix at each frequency is replaced by its eigenvalue-clipped
        version (the nearest positive semidefinite matrix in the Frobenius
        norm, Higham 1988), rescaled to unit diagonal so that every channel
        keeps its ASD.

        Returns
        -------
        (MultiChannelProfile, dict)
            The profile with ``repair=True``, and ``frobenius_max`` (largest
            Frobenius distance between given and repaired coherence matrices),
            ``coherence_change_max`` and ``phase_change_deg_max`` (largest change
            of any pair's coherence and phase), ``frequency_hz`` (where the
            distance is largest), all over :meth:`check_grid_hz`.

        Examples
        --------
        >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
        >>> one = np.array([1.0])
        >>> bad = MultiChannelProfile(("x", "y", "z"), (flat, flat, flat), (ChannelPair(0, 1, one, 0.9 * one, 0 * one),
        ...     ChannelPair(1, 2, one, 0.9 * one, 0 * one), ChannelPair(0, 2, one, 0 * one, 0 * one)))
        >>> fixed, moved = bad.repaired()
        >>> fixed.check_psd() is None, moved["coherence_change_max"] > 0
        (True, True)

        References
        ----------
        Higham (1988), nearest symmetric positive semidefinite matrix (Frobenius norm).
        """
        f = self.check_grid_hz()
        given = MultiChannelProfile(self.channel_names, self.channels, self.pairs, self.name, self.description,
                                    self.source, repair=False).coherence_matrix(f)
        fixed, distance = nearest_coherence_matrix(given)
        change_coherence = np.abs(np.abs(fixed) ** 2 - np.abs(given) ** 2)
        change_phase = np.abs(np.angle(fixed * np.conj(given), deg=True))
        change_phase[np.abs(given) * np.abs(fixed) < 1e-12] = 0.0
        worst = int(np.argmax(distance))
        moved = {
            "frobenius_max": float(distance[worst]),
            "coherence_change_max": float(np.max(change_coherence)),
            "phase_change_deg_max": float(np.max(change_phase)),
            "frequency_hz": float(f[worst]),
            "method": "eigenvalue clipping (Higham 1988) of the coherence matrix at each frequency, then unit "
                      "diagonal restored (each channel keeps its ASD)",
        }
        return (MultiChannelProfile(self.channel_names, self.channels, self.pairs, self.name, self.description,
                                    self.source, repair=True), moved)

    def scaled_db(self, level_db: float) -> "MultiChannelProfile":
        """Every channel shifted by ``level_db`` decibels (coherence and phase unchanged).

        Examples
        --------
        >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
        >>> float(MultiChannelProfile(("x", "y"), (flat, flat)).scaled_db(10.0).channels[1].asd_g2_per_hz[0])
        0.1

        References
        ----------
        Decibels of a power quantity: 10 log10 of the ASD ratio.
        """
        return MultiChannelProfile(self.channel_names, tuple(c.scaled_db(level_db) for c in self.channels), self.pairs,
                                   self.name, self.description, self.source, self.repair)

    def summary(self) -> dict:
        """Per-channel figures (as :meth:`AsdProfile.summary`) and the pairs, as plain data.

        Examples
        --------
        >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
        >>> [c["name"] for c in MultiChannelProfile(("x", "y"), (flat, flat)).summary()["channels"]]
        ['x', 'y']

        References
        ----------
        See :meth:`AsdProfile.summary`.
        """
        return {
            "name": self.name,
            "description": self.description,
            "channels": [{**c.summary(), "name": n} for n, c in zip(self.channel_names, self.channels)],
            "pairs": [
                {
                    "channels": [self.channel_names[p.first], self.channel_names[p.second]],
                    "frequency_hz": p.frequencies_hz.tolist(),
                    "coherence": p.coherence.tolist(),
                    "phase_deg": p.phase_deg.tolist(),
                }
                for p in self.pairs
            ],
            "repair": bool(self.repair),
        }

    def to_dict(self) -> dict:
        """Channels (breakpoints in g^2/Hz) and pairs as plain data.

        Examples
        --------
        >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
        >>> MultiChannelProfile(("x", "y"), (flat, flat)).to_dict()["pairs"]
        []

        References
        ----------
        None (bookkeeping).
        """
        return {
            "name": self.name,
            "channels": [
                {"name": n, "frequency_hz": c.frequencies_hz.tolist(), "asd_g2_per_hz": c.asd_g2_per_hz.tolist(),
                 "grms_g": c.grms}
                for n, c in zip(self.channel_names, self.channels)
            ],
            "pairs": self.summary()["pairs"],
            "repair": bool(self.repair),
        }


def _active_only(matrix: np.ndarray, active: np.ndarray) -> np.ndarray:
    """Coherence matrices with the rows/columns of inactive channels (``active`` (C, K) False) set to identity."""
    inactive = ~active.T  # (K, C)
    if np.any(inactive):
        matrix = matrix.copy()
        mask = inactive[:, :, None] | inactive[:, None, :]
        matrix[mask] = 0.0
        count = matrix.shape[1]
        index = np.arange(count)
        matrix[:, index, index] = 1.0
    return matrix


def nearest_coherence_matrix(matrix: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Nearest positive semidefinite coherence matrices (eigenvalues clipped at 0, unit diagonal restored).

    Parameters
    ----------
    matrix : numpy.ndarray, complex, shape (K, C, C)
        Hermitian matrices with unit diagonal.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        The repaired matrices (unchanged where already positive semidefinite)
        and the Frobenius distance moved at each of the K frequencies.

    Examples
    --------
    >>> m = np.array([[[1, 1, 1], [1, 1, 1], [1, 1, -1.0]]], dtype=complex)
    >>> fixed, distance = nearest_coherence_matrix(m)
    >>> bool(np.linalg.eigvalsh(fixed)[0, 0] >= -1e-12), bool(distance[0] > 0)
    (True, True)

    References
    ----------
    Higham, N. J., "Computing a nearest symmetric positive semidefinite matrix",
    Linear Algebra Appl. 103, 1988 (clip the negative eigenvalues of the Hermitian part).
    """
    values, vectors = np.linalg.eigh(matrix)
    bad = values[:, 0] < -PSD_TOLERANCE
    fixed = matrix.copy()
    if np.any(bad):
        clipped = np.maximum(values[bad], 0.0)
        near = (vectors[bad] * clipped[:, None, :]) @ np.conj(np.swapaxes(vectors[bad], 1, 2))
        diagonal = np.sqrt(np.real(np.einsum("kii->ki", near)))
        diagonal[diagonal <= 0] = 1.0
        near = near / diagonal[:, :, None] / diagonal[:, None, :]
        fixed[bad] = near
    distance = np.linalg.norm(fixed - matrix, axis=(1, 2))
    return fixed, distance


def _ldl(matrix: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Square-root-free Cholesky ``M = L D L^H`` of many small Hermitian matrices at once, shape (K, C, C).

    Vectorised over K (a loop over the C columns only).  Pivots are returned
    relative to the largest diagonal entry of each matrix; a pivot at or below
    zero stops its column (the entries below it are set to 0), so the result
    is only a factor where every relative pivot is clearly positive.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Unit lower-triangular L (K, C, C) and the relative pivots D / max(diag) (K, C).

    References
    ----------
    Golub & Van Loan (2013), the LDL^T (here LDL^H) factorisation, section 4.1.
    """
    count = matrix.shape[1]
    lower = np.zeros_like(matrix)
    pivots = np.empty(matrix.shape[:2])
    scale = np.max(np.real(np.einsum("kii->ki", matrix)), axis=1)
    scale[scale <= 0] = 1.0
    for j in range(count):
        d = matrix[:, j, j].real - np.sum(np.abs(lower[:, j, :j]) ** 2 * pivots[:, :j], axis=1)
        pivots[:, j] = d
        lower[:, j, j] = 1.0
        usable = d > DEFINITE_FRACTION * scale
        inverse = np.where(usable, 1.0 / np.where(usable, d, 1.0), 0.0)
        for i in range(j + 1, count):
            v = matrix[:, i, j] - np.sum(lower[:, i, :j] * np.conj(lower[:, j, :j]) * pivots[:, :j], axis=1)
            lower[:, i, j] = v * inverse
    return lower, pivots / scale[:, None]


def factor_matrices(matrix: np.ndarray) -> tuple[np.ndarray, int]:
    """Factors ``H`` with ``H H^H = M`` for Hermitian positive semidefinite matrices M, shape (K, C, C).

    Cholesky where M is definite (smallest eigenvalue above
    :data:`DEFINITE_FRACTION` of the largest), else ``V sqrt(max(lambda, 0))``
    from its eigen-decomposition (e.g. fully coherent channels).

    Parameters
    ----------
    matrix : numpy.ndarray, complex, shape (K, C, C)
        ``M[a, b] = E[X_a conj(X_b)]`` (any unit U^2).

    Returns
    -------
    (numpy.ndarray, int)
        Factors (U), and the number of lines factored by eigen-decomposition.

    Examples
    --------
    >>> m = np.array([[[2.0, 1.0], [1.0, 2.0]], [[1.0, 1.0], [1.0, 1.0]]], dtype=complex)
    >>> h, semidefinite = factor_matrices(m)
    >>> bool(np.allclose(h @ np.conj(np.swapaxes(h, 1, 2)), m)), semidefinite
    (True, 1)

    References
    ----------
    Golub, G. H. & Van Loan, C. F., *Matrix Computations*, 4th ed., 2013 (Cholesky
    and symmetric eigen-decomposition); Smallwood, D. O. & Paez, T. L., "A frequency
    domain method for the generation of partially coherent normal stationary time
    domain signals", Shock and Vibration 1(1), 1993.
    """
    # Cholesky as L sqrt(D) from the vectorised LDL^H; where a pivot is not clearly positive, eigen-decomposition
    lower, pivots = _ldl(matrix)
    scale = np.max(np.real(np.einsum("kii->ki", matrix)), axis=1)
    rest = np.flatnonzero(np.min(pivots, axis=1) <= DEFINITE_FRACTION)
    factors = lower
    factors *= np.sqrt(np.maximum(pivots * scale[:, None], 0.0))[:, None, :]
    if rest.size:
        values, vectors = np.linalg.eigh(matrix[rest])
        factors[rest] = vectors * np.sqrt(np.maximum(values, 0.0))[:, None, :]
    return factors, int(rest.size)


# ------------------------------------------------------------------ reading
def _number(value, source, location, what) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{what} must be a number, got {value!r}", source, location)
    number = float(value)
    if not math.isfinite(number):
        raise InputError(f"{what} must be a finite number, got {value!r}", source, location)
    return number


def _coherence(value, source, location) -> float:
    number = _number(value, source, location, "coherence")
    if not 0.0 <= number <= 1.0:
        raise InputError(f"coherence {number:g} must lie in 0..1 (the ordinary, magnitude-squared coherence)",
                         source, location)
    return number


def _suggest(key: str, allowed) -> str:
    from vibsynth.profile.files import _suggest as suggest

    return suggest(key, allowed)


def parse_multichannel_toml(data: dict, source: str = "<toml>", folder: str | os.PathLike | None = None) -> MultiChannelProfile:
    """A :class:`MultiChannelProfile` from a parsed TOML document (format in the module docstring).

    Parameters
    ----------
    data : dict
        The parsed document, with a ``channels`` array of tables.
    source : str
        File name for messages.
    folder : path, optional
        Folder that relative ``profile`` paths are read from (default: the current folder).

    Returns
    -------
    MultiChannelProfile

    Raises
    ------
    InputError
        Naming the file, the table (``channels[2].profile``, ``pairs[1].coherence``) and what would be right.

    Examples
    --------
    >>> doc = {"channels": [{"name": "x", "profile": "bench-flat"}, {"name": "y", "profile": "bench-flat"}],
    ...        "pairs": [{"channels": ["x", "y"], "coherence": 0.5, "phase_deg": 30.0}]}
    >>> parse_multichannel_toml(doc).channel_names
    ('x', 'y')

    References
    ----------
    TOML v1.0.0 (toml.io).
    """
    from vibsynth.profile.files import profile_from_table, read_profile

    for key in data:
        if key not in _TOP_KEYS:
            raise InputError(f"unknown key '{key}'; {_suggest(key, _TOP_KEYS)}", source, key)
    tables = data.get("channels")
    if not isinstance(tables, list) or not tables or not all(isinstance(t, dict) for t in tables):
        raise InputError("'channels' must be an array of tables ([[channels]]) with at least one channel", source,
                         "channels")
    names, profiles = [], []
    for index, table in enumerate(tables):
        location = f"channels[{index + 1}]"
        for key in table:
            if key not in _CHANNEL_KEYS:
                raise InputError(f"unknown key '{key}'; {_suggest(key, _CHANNEL_KEYS)}", source, f"{location}.{key}")
        name = table.get("name")
        if not isinstance(name, str) or not name.strip() or "," in name or '"' in name:
            raise InputError("each channel needs a 'name' (text without commas or quotes, e.g. \"x\")", source,
                             f"{location}.name")
        name = name.strip()
        if name in names:
            raise InputError(f"channel name {name!r} is used twice; names must be unique", source, f"{location}.name")
        has_file, has_points = "profile" in table, "breakpoints" in table
        if has_file == has_points:
            raise InputError("give either 'profile' (a preset name or a profile file) or [[channels.breakpoints]]",
                             source, location)
        if has_file:
            spec = table["profile"]
            if not isinstance(spec, str):
                raise InputError("'profile' must be text: a preset name or a .toml/.csv path", source,
                                 f"{location}.profile")
            for key in ("unit", "breakpoints"):
                if key in table:
                    raise InputError(f"'{key}' belongs to an inline channel; with 'profile' it is read from the file",
                                     source, f"{location}.{key}")
            path = Path(spec)
            if folder is not None and not path.is_absolute() and (Path(folder) / path).exists():
                spec = str(Path(folder) / path)
            try:
                profile = read_profile(spec)
            except InputError as error:
                raise InputError(f"channel '{name}': {error.one_line()}", source, f"{location}.profile") from None
            if "level_db" in table and "grms" in table:
                raise InputError("give 'level_db' or 'grms', not both", source, location)
            if "level_db" in table:
                profile = profile.scaled_db(_number(table["level_db"], source, f"{location}.level_db", "level_db (dB)"))
            if "grms" in table:
                profile = profile.scaled_to_grms(_number(table["grms"], source, f"{location}.grms", "grms (g)"))
        else:
            inline = {k: v for k, v in table.items() if k != "profile"}
            profile = profile_from_table(inline, source, prefix=f"{location}.", allowed=_CHANNEL_KEYS)
        names.append(name)
        profiles.append(profile.with_name(name, profile.description))
    pairs = []
    tables = data.get("pairs", [])
    if not isinstance(tables, list) or not all(isinstance(t, dict) for t in tables):
        raise InputError("'pairs' must be an array of tables ([[pairs]])", source, "pairs")
    seen = {}
    for index, table in enumerate(tables):
        location = f"pairs[{index + 1}]"
        for key in table:
            if key not in _PAIR_KEYS:
                raise InputError(f"unknown key '{key}'; {_suggest(key, _PAIR_KEYS)}", source, f"{location}.{key}")
        members = table.get("channels")
        if (not isinstance(members, list) or len(members) != 2 or not all(isinstance(m, str) for m in members)
                or members[0] == members[1]):
            raise InputError(f"'channels' must name two different channels, e.g. [\"{names[0]}\", "
                             f"\"{names[-1]}\"]", source, f"{location}.channels")
        for member in members:
            if member not in names:
                raise InputError(f"no channel named {member!r}; channels: {', '.join(names)}", source,
                                 f"{location}.channels")
        first, second = names.index(members[0]), names.index(members[1])
        key = tuple(sorted((first, second)))
        if key in seen:
            raise InputError(f"the pair {members[0]}/{members[1]} is already given in pairs[{seen[key]}]", source,
                             f"{location}.channels")
        seen[key] = index + 1
        if "breakpoints" in table:
            for key_name in ("coherence", "phase_deg"):
                if key_name in table:
                    raise InputError(f"give '{key_name}' in each [[pairs.breakpoints]] or as a number, not both",
                                     source, f"{location}.{key_name}")
            points = table["breakpoints"]
            if not isinstance(points, list) or not points or not all(isinstance(p, dict) for p in points):
                raise InputError("'breakpoints' must be an array of tables ([[pairs.breakpoints]])", source,
                                 f"{location}.breakpoints")
            frequencies, coherences, phases = [], [], []
            for number, point in enumerate(points):
                where = f"{location}.breakpoints[{number + 1}]"
                for key_name in point:
                    if key_name not in _PAIR_POINT_KEYS:
                        raise InputError(f"unknown key '{key_name}'; {_suggest(key_name, _PAIR_POINT_KEYS)}", source,
                                         where)
                for key_name in ("frequency", "coherence"):
                    if key_name not in point:
                        raise InputError(f"missing '{key_name}'", source, where)
                frequency = _number(point["frequency"], source, f"{where}.frequency", "frequency (Hz)")
                if frequency <= 0 or (frequencies and frequency <= frequencies[-1]):
                    raise InputError(f"frequency {frequency:g} Hz must be > 0 and above the previous breakpoint's",
                                     source, f"{where}.frequency")
                frequencies.append(frequency)
                coherences.append(_coherence(point["coherence"], source, f"{where}.coherence"))
                phases.append(_number(point.get("phase_deg", 0.0), source, f"{where}.phase_deg", "phase_deg (degrees)"))
        else:
            if "coherence" not in table:
                raise InputError("give 'coherence' (0..1) and 'phase_deg', or [[pairs.breakpoints]]", source, location)
            frequencies = [1.0]
            coherences = [_coherence(table["coherence"], source, f"{location}.coherence")]
            phases = [_number(table.get("phase_deg", 0.0), source, f"{location}.phase_deg", "phase_deg (degrees)")]
        pairs.append(ChannelPair(first, second, np.array(frequencies), np.array(coherences), np.array(phases)))
    name = data.get("name", Path(source).stem if source else "multi-channel")
    description = data.get("description", "")
    if not isinstance(name, str) or not isinstance(description, str):
        raise InputError("'name' and 'description' must be text", source)
    repair = data.get("repair", False)
    if not isinstance(repair, bool):
        raise InputError("'repair' must be true or false", source, "repair")
    return MultiChannelProfile(tuple(names), tuple(profiles), tuple(pairs), name, description, source, repair)


def format_multichannel_toml(profile: MultiChannelProfile) -> str:
    """A multi-channel profile as self-contained TOML (every channel inline, every pair with its breakpoints).

    Examples
    --------
    >>> flat = AsdProfile([20, 2000], [0.01, 0.01])
    >>> text = format_multichannel_toml(MultiChannelProfile(("x", "y"), (flat, flat)))
    >>> parse_any_toml(text).channel_names
    ('x', 'y')

    References
    ----------
    TOML v1.0.0 (toml.io).
    """
    from vibsynth.profile.files import _toml_string

    lines = [f"name = {_toml_string(profile.name)}", f"description = {_toml_string(profile.description)}"]
    if profile.repair:
        lines.append("repair = true")
    for name, channel in zip(profile.channel_names, profile.channels):
        lines += ["", "[[channels]]", f"name = {_toml_string(name)}",
                  f"# {channel.grms:.6g} g RMS, band {channel.frequency_min_hz:g}-{channel.frequency_max_hz:g} Hz"]
        for frequency, asd in zip(channel.frequencies_hz, channel.asd_g2_per_hz):
            lines += ["[[channels.breakpoints]]", f"frequency = {float(frequency)!r}", f"asd = {float(asd)!r}"]
    for pair in profile.pairs:
        names = (profile.channel_names[pair.first], profile.channel_names[pair.second])
        lines += ["", "[[pairs]]", f"channels = [{_toml_string(names[0])}, {_toml_string(names[1])}]"]
        for frequency, coherence, phase in zip(pair.frequencies_hz, pair.coherence, pair.phase_deg):
            lines += ["[[pairs.breakpoints]]", f"frequency = {float(frequency)!r}",
                      f"coherence = {float(coherence)!r}", f"phase_deg = {float(phase)!r}"]
    return "\n".join(lines) + "\n"


def read_any_profile(spec: str | os.PathLike):
    """Read a single-channel profile (:class:`AsdProfile`) or a multi-channel one (:class:`MultiChannelProfile`).

    A TOML file with ``[[channels]]`` is multi-channel; anything else is read by
    :func:`vibsynth.profile.files.read_profile`.  A multi-channel file with one
    channel gives that channel's :class:`AsdProfile` (so it makes exactly the
    samples of the single-channel profile).

    Parameters
    ----------
    spec : str or path
        A .toml/.csv file or a preset name.

    Returns
    -------
    AsdProfile or MultiChannelProfile

    Examples
    --------
    >>> read_any_profile("bench-flat").name
    'bench-flat'

    References
    ----------
    See :func:`parse_multichannel_toml`.
    """
    from vibsynth.profile.files import read_profile

    text_spec = os.fspath(spec)
    path = Path(text_spec)
    if path.suffix.lower() == ".toml" and path.is_file():
        try:
            text = path.read_bytes().decode("utf-8-sig")
            data = tomllib.loads(text)
        except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
            return read_profile(spec)  # the single-channel reader words the problem
        if "channels" in data:
            profile = parse_multichannel_toml(data, text_spec, folder=path.parent)
            return profile.channels[0] if profile.channel_count == 1 else profile
    return read_profile(spec)


def parse_any_toml(text: str, source: str = "<toml>"):
    """A TOML document as an :class:`AsdProfile` or (with ``[[channels]]``) a :class:`MultiChannelProfile`.

    Examples
    --------
    >>> parse_any_toml('[[channels]]\\nname = "x"\\nprofile = "bench-flat"\\n').name
    'x'

    References
    ----------
    TOML v1.0.0.
    """
    from vibsynth.profile.files import parse_toml_profile

    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise InputError(f"not valid TOML ({error})", source) from None
    if "channels" in data:
        profile = parse_multichannel_toml(data, source)
        return profile.channels[0] if profile.channel_count == 1 else profile
    return parse_toml_profile(text, source)


__all__ = [
    "ChannelPair",
    "MultiChannelProfile",
    "PsdViolation",
    "factor_matrices",
    "format_multichannel_toml",
    "nearest_coherence_matrix",
    "parse_any_toml",
    "parse_multichannel_toml",
    "read_any_profile",
]
