"""How much do damage and extreme response vary from one drive to the next?  FDS/ERS scatter over N records.

For a profile, N independent Gaussian realizations (records) are synthesized
in memory by the drive pipeline itself (the Monte-Carlo engine
:mod:`vibsynth.montecarlo`: record ``i`` from spawn key ``i`` of the seed,
exactly as ``vibsynth peaks`` makes its records), and each record's fatigue
damage spectrum (FDS) and extreme response spectrum (ERS) is computed as for a
drive file (:func:`vibsynth.durability.damage.drive_severity`:
ramp-invariant SDOF filter, rainflow, Miner's rule).  Each record's damage is
scaled from its length to the exposure (damage grows linearly in time); its
ERS is its actual largest response ``|z|``.  Per natural frequency the
records' mean, standard deviation, minimum, maximum and 5 % / 95 % points are
reported, beside the profile's closed forms: the narrow-band and Dirlik FDS
over the exposure, and the expected largest ``|z|`` in one record with its
spread (Davenport, with ``2 nu0 T`` crossings because both signs count).

With ``amplitude="fixed"`` (the default, as ``vibsynth generate``) the records
are the drives the generator makes: random phases, line amplitudes fixed by
the profile; ``"rayleigh"`` draws the amplitudes too, which gives the scatter
of a Gaussian process (larger).

References
----------
.. [1] C. Lalanne, "Mechanical Vibration and Shock Analysis", vol. 4 "Fatigue
       Damage" and vol. 5 "Specification Development", ISTE/Wiley (FDS, ERS).
.. [2] A. G. Davenport, "Note on the distribution of the largest value of a
       random function with application to gust loading", Proc. Instn Civ.
       Engrs 28, 187-196 (1964).
.. [3] ASTM E1049-85 (2017), rainflow counting; M. A. Miner, J. Appl. Mech.
       12, A159-A164 (1945).
.. [4] M. Shinozuka and C.-M. Jan, J. Sound Vib. 25(1), 111-128 (1972)
       (Monte-Carlo by spectral representation).
"""

from __future__ import annotations

import functools
import math
import warnings
from dataclasses import dataclass

import numpy as np

from vibsynth.errors import InputError, VibsynthWarning

__all__ = ["SeverityScatter", "default_record_rate_hz", "severity_scatter", "SCATTER_PERCENTILES"]

#: The percentiles reported beside the mean, standard deviation, minimum and maximum.
SCATTER_PERCENTILES = (5.0, 95.0)


def default_record_rate_hz(profile, fn_max_hz: float) -> float:
    """Sample rate of the records by default: the package's rate rule, high enough for the drive FDS.

    The smallest common rate (1024, 2048, 4096, 5120, 8192, ... Hz) at least
    2.56 x the profile's top frequency and at least ``fn_max_hz / 0.1`` (the
    drive FDS is given up to 0.1 x the rate, see
    :data:`vibsynth.durability.report.DRIVE_FN_FRACTION`).

    Parameters
    ----------
    profile : AsdProfile
        The specification, g^2/Hz.
    fn_max_hz : float
        Highest natural frequency, Hz.

    Returns
    -------
    float
        Sample rate, Hz.

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> default_record_rate_hz(AsdProfile([20.0, 2000.0], [0.01, 0.01]), 2000.0)
    20480.0
    >>> default_record_rate_hz(AsdProfile([20.0, 2000.0], [0.01, 0.01]), 400.0)
    5120.0

    References
    ----------
    2.56 x the top frequency is common practice for anti-alias margins (no
    source); 10 x the highest fn: measured for this package's drive FDS (see
    :data:`vibsynth.durability.report.DRIVE_FN_FRACTION`).
    """
    from vibsynth._checks import RATE_MARGIN_FACTOR, default_rate_hz
    from vibsynth.durability.report import DRIVE_FN_FRACTION

    # the rate rule takes a top frequency; this one asks for fn_max / fraction (a hair less: no rounding up a rate)
    top = max(float(profile.frequency_max_hz), float(fn_max_hz) / DRIVE_FN_FRACTION / RATE_MARGIN_FACTOR * (1 - 1e-12))
    return default_rate_hz(top)


@dataclass(frozen=True)
class SeverityScatter:
    """FDS and ERS of N synthesized records of a profile, and the closed forms to hold them against.

    Attributes
    ----------
    fn_hz : numpy.ndarray
        Natural frequencies, Hz.
    q, b : float
        Amplification and Basquin exponent.
    duration_s : float
        Exposure the damage is scaled to, s.
    record_duration_s : float
        Length of each record, s.
    rate_hz : float
        Sample rate of the records, Hz.
    seed : int
        Root seed (record i uses spawn key ``(i,)``).
    amplitude : str
        ``fixed`` or ``rayleigh`` line amplitudes.
    fds : numpy.ndarray
        Damage of each record scaled to ``duration_s`` (m^b, K = C = 1), shape
        (records, natural frequencies); NaN above 0.1 x the rate.
    ers_g : numpy.ndarray
        Each record's largest ``|z|`` as pseudo-acceleration, g, same shape.
    expected_ers_g, expected_ers_std_g, expected_ers_p05_g, expected_ers_p95_g : numpy.ndarray
        Largest ``|z|`` in one record from theory (Davenport, ``2 nu0 T``
        crossings): mean, standard deviation, 5 % and 95 % points, g.
    warnings : tuple of str
    """

    fn_hz: np.ndarray
    q: float
    b: float
    duration_s: float
    record_duration_s: float
    rate_hz: float
    seed: int
    amplitude: str
    fds: np.ndarray
    ers_g: np.ndarray
    expected_ers_g: np.ndarray
    expected_ers_std_g: np.ndarray
    expected_ers_p05_g: np.ndarray
    expected_ers_p95_g: np.ndarray
    warnings: tuple = ()

    @property
    def records(self) -> int:
        """Number of records."""
        return int(self.fds.shape[0])

    @property
    def damage_scale(self) -> float:
        """Factor from a record's damage to the exposure's: ``duration_s / record_duration_s``."""
        return self.duration_s / self.record_duration_s

    @staticmethod
    def _summary(values: np.ndarray) -> dict:
        """Mean, sample standard deviation, min, max and percentiles over the records (axis 0)."""
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns (fn above 0.1 x rate)
            low, high = np.percentile(values, SCATTER_PERCENTILES, axis=0)
            return {
                "mean": np.mean(values, axis=0),
                "std": np.std(values, axis=0, ddof=1),
                "min": np.min(values, axis=0),
                "max": np.max(values, axis=0),
                "p05": low,
                "p95": high,
            }

    def fds_summary(self) -> dict:
        """The records' FDS per natural frequency: ``mean``, ``std`` (ddof 1), ``min``, ``max``, ``p05``, ``p95`` (m^b).

        Examples
        --------
        >>> from vibsynth.profile.asd import AsdProfile
        >>> scatter = severity_scatter(AsdProfile([20.0, 500.0], [0.01, 0.01]), 60.0, 3, record_duration_s=1.0,
        ...                            fn_hz=[100.0])
        >>> summary = scatter.fds_summary()
        >>> bool(summary["min"][0] <= summary["mean"][0] <= summary["max"][0])
        True

        References
        ----------
        numpy.percentile (linear interpolation between order statistics).
        """
        return self._summary(self.fds)

    def ers_summary(self) -> dict:
        """The records' ERS per natural frequency, as :meth:`fds_summary` (g).

        Examples
        --------
        >>> from vibsynth.profile.asd import AsdProfile
        >>> scatter = severity_scatter(AsdProfile([20.0, 500.0], [0.01, 0.01]), 60.0, 3, record_duration_s=1.0,
        ...                            fn_hz=[100.0])
        >>> bool(scatter.ers_summary()["p05"][0] <= scatter.ers_summary()["p95"][0])
        True

        References
        ----------
        numpy.percentile (linear interpolation between order statistics).
        """
        return self._summary(self.ers_g)

    def to_dict(self, narrowband=None, dirlik=None) -> dict:
        """Plain data: the keys ``vibsynth severity --records`` adds to the severity JSON.

        Parameters
        ----------
        narrowband, dirlik : array_like, optional
            The profile's FDS over ``duration_s`` (m^b); with them the ratios
            ``fds_records_mean_to_narrowband`` and ``..._to_dirlik`` are added.

        Returns
        -------
        dict
            FDS in m^b without a suffix, as the other ``fds_*`` keys; ERS in g (``_g``).

        Examples
        --------
        >>> from vibsynth.profile.asd import AsdProfile
        >>> scatter = severity_scatter(AsdProfile([20.0, 500.0], [0.01, 0.01]), 60.0, 2, record_duration_s=1.0,
        ...                            fn_hz=[100.0])
        >>> data = scatter.to_dict()
        >>> data["records"], len(data["fds_each_record"]), data["record_damage_scale"]
        (2, 2, 60.0)

        References
        ----------
        RFC 8259 (JSON); keys carry their unit as a suffix.
        """
        fds, ers = self.fds_summary(), self.ers_summary()
        data = {
            "records": self.records,
            "record_duration_s": self.record_duration_s,
            "record_rate_hz": self.rate_hz,
            "record_seed": self.seed,
            "record_amplitude": self.amplitude,
            "record_damage_scale": self.damage_scale,
        }
        data.update({f"fds_records_{key}": value.tolist() for key, value in fds.items()})
        if narrowband is not None:
            data["fds_records_mean_to_narrowband"] = (fds["mean"] / np.asarray(narrowband)).tolist()
        if dirlik is not None:
            data["fds_records_mean_to_dirlik"] = (fds["mean"] / np.asarray(dirlik)).tolist()
        data.update({f"ers_records_{key}_g": value.tolist() for key, value in ers.items()})
        data.update({
            "ers_records_expected_g": self.expected_ers_g.tolist(),
            "ers_records_expected_std_g": self.expected_ers_std_g.tolist(),
            "ers_records_expected_p05_g": self.expected_ers_p05_g.tolist(),
            "ers_records_expected_p95_g": self.expected_ers_p95_g.tolist(),
            "fds_each_record": self.fds.tolist(),
            "ers_each_record_g": self.ers_g.tolist(),
        })
        return data


def _record_severity(plan, entropy: int, fn_hz, q: float, b: float, step, index: int) -> tuple:
    """Damage (unscaled, m^b), ERS (g) and analysed duration (s) of Monte-Carlo record ``index``."""
    from vibsynth.durability.damage import drive_severity
    from vibsynth.montecarlo import CHUNK_SAMPLES, record_synthesizer

    synthesizer = record_synthesizer(plan, entropy, index)

    def chunks():
        for chunk in synthesizer.iter_chunks(CHUNK_SAMPLES):
            yield chunk[:, 0]
            if step is not None:
                step(chunk.shape[0])

    result = drive_severity(chunks(), plan.rate_hz, fn_hz, q=q, b=b)
    return result.fds, result.ers_g, result.duration_s


def _largest_abs_theory(profile, fn, q: float, duration_s: float):
    """Davenport's largest |z| in ``duration_s`` (2 nu0 T crossings) as ERS: mean, std, 5 %, 95 % (g)."""
    from vibsynth.analysis.extremes import davenport_expected_largest_peak_sigma, davenport_largest_peak_std_sigma
    from vibsynth.durability.damage import ers_from_displacement_g
    from vibsynth.durability.sdof import response_moments

    mean, std, p05, p95 = (np.empty(fn.size) for _ in range(4))
    for index, f in enumerate(fn):
        m0, m2 = response_moments(profile, float(f), q, kind="relative_displacement", powers=(0, 2))
        sigma = math.sqrt(m0)
        crossings = 2.0 * math.sqrt(m2 / m0)  # up-crossings of +a and down-crossings of -a: |z| > a
        mean[index] = davenport_expected_largest_peak_sigma(crossings, duration_s) * sigma
        std[index] = davenport_largest_peak_std_sigma(crossings, duration_s) * sigma
        # P(max <= x) = exp(-n exp(-x^2/2)), n = crossings T (Davenport 1964): x_p = sqrt(2 ln(n / -ln p))
        n = crossings * duration_s
        p05[index] = math.sqrt(2.0 * math.log(n / -math.log(0.05))) * sigma
        p95[index] = math.sqrt(2.0 * math.log(n / -math.log(0.95))) * sigma
    return tuple(ers_from_displacement_g(fn, values) for values in (mean, std, p05, p95))


def severity_scatter(profile, duration_s: float, records: int, *, record_duration_s: float | None = None,
                     record_rate_hz: float | None = None, seed=0, fn_hz=None, q: float | None = None,
                     b: float | None = None, amplitude: str = "fixed", progress=None, mapper=None,
                     memory_budget_bytes: int | None = None) -> SeverityScatter:
    """FDS and ERS of N synthesized Gaussian records of a profile, per natural frequency.

    Record ``i`` is made by :class:`vibsynth.generate.pipeline.Synthesizer`
    from ``SeedSequence(seed, spawn_key=(i,))`` (:mod:`vibsynth.montecarlo`,
    as ``vibsynth peaks``), its FDS and ERS by
    :func:`vibsynth.durability.damage.drive_severity`.  The records depend only
    on their index, so they may be made anywhere (``mapper``) with the same
    result, bit for bit.

    Parameters
    ----------
    profile : AsdProfile
        Base-acceleration ASD, g^2/Hz.
    duration_s : float
        Exposure the damage is scaled to, s.
    records : int
        N, >= 2.
    record_duration_s : float, optional
        Length of each record, s (default ``duration_s``).  Shorter records
        run faster; their damage is scaled to ``duration_s`` and their ERS is
        the largest response in ``record_duration_s``.
    record_rate_hz : float, optional
        Sample rate of the records, Hz (default :func:`default_record_rate_hz`).
        Natural frequencies above 0.1 x the rate get NaN (with a warning).
    seed : int
        Root seed (>= 0).
    fn_hz : array_like, optional
        Natural frequencies, Hz (default: 40 log-spaced over the profile's band).
    q, b : float, optional
        Amplification and Basquin exponent (defaults 10 and 8, common practice, no source).
    amplitude : {"fixed", "rayleigh"}
        Line amplitudes of the records (``fixed``: as drive files).
    progress : callable, optional
        Called with a sample count as records are made.
    mapper : callable, optional
        Where the records are made (see :func:`vibsynth.montecarlo.map_records`).
    memory_budget_bytes : int, optional
        Working memory for one periodic record (default the generator's).

    Returns
    -------
    SeverityScatter

    Raises
    ------
    InputError
        ``records`` below 2, a rate too low for every natural frequency, or
        what the drive plan refuses (``record_duration_s``, ``record_rate_hz``).

    Warns
    -----
    VibsynthWarning
        Natural frequencies above 0.1 x the rate are left out; the plan's warnings.

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> flat = AsdProfile([20.0, 500.0], [0.01, 0.01])
    >>> here = severity_scatter(flat, 60.0, 3, record_duration_s=1.0, fn_hz=[50.0, 200.0])
    >>> there = severity_scatter(flat, 60.0, 3, record_duration_s=1.0, fn_hz=[50.0, 200.0],
    ...                          mapper=lambda f, blocks: map(f, blocks))
    >>> here.fds.shape, bool((here.fds == there.fds).all() and (here.ers_g == there.ers_g).all())
    ((3, 2), True)

    References
    ----------
    Lalanne, vol. 4-5 (FDS, ERS); Davenport (1964); ASTM E1049-85 (2017);
    Miner (1945); Shinozuka & Jan (1972).
    """
    from vibsynth.durability.damage import DEFAULT_B, _check_b, natural_frequency_grid
    from vibsynth.durability.report import DRIVE_FN_FRACTION
    from vibsynth.durability.sdof import DEFAULT_Q, _check_q, _positive
    from vibsynth.generate.plan import make_plan
    from vibsynth.generate.seeds import root_seed_sequence, seed_entropy
    from vibsynth.montecarlo import map_records

    if isinstance(records, bool) or not isinstance(records, (int, np.integer)) or records < 2:
        raise InputError(f"records {records!r} must be a whole number >= 2 (a scatter needs two records or more)",
                         "records")
    exposure = _positive(duration_s, "duration_s", "s")
    length = exposure if record_duration_s is None else _positive(record_duration_s, "record_duration_s", "s")
    qq = _check_q(DEFAULT_Q if q is None else q)
    bb = _check_b(DEFAULT_B if b is None else b)
    if fn_hz is None:
        fn = natural_frequency_grid(profile.frequency_min_hz, profile.frequency_max_hz, 40)
    else:
        fn = np.atleast_1d(np.asarray(fn_hz, dtype=np.float64))
        if fn.ndim != 1 or fn.size == 0 or not np.all(np.isfinite(fn)) or np.any(fn <= 0):
            raise InputError("fn_hz must be a 1-D list of natural frequencies > 0 Hz", location="fn_hz")
    rate = default_record_rate_hz(profile, float(fn.max())) if record_rate_hz is None else \
        _positive(record_rate_hz, "record_rate_hz", "Hz")
    usable = fn <= DRIVE_FN_FRACTION * rate
    if not usable.any():
        raise InputError(f"{rate:g} Hz is too low for natural frequencies from {fn.min():g} Hz (the records' "
                         f"FDS needs fn <= {DRIVE_FN_FRACTION} x rate; give at least {fn.min() / DRIVE_FN_FRACTION:g} Hz)",
                         "record_rate_hz")
    collected = []
    if not usable.all():
        collected.append(f"the records' FDS/ERS is computed up to {DRIVE_FN_FRACTION} x their sample rate "
                         f"({DRIVE_FN_FRACTION * rate:g} Hz); higher natural frequencies are left out (there the "
                         f"sampled peaks under-estimate the damage: give a rate of 10 x the highest fn)")
    options = {"amplitude": amplitude}
    if memory_budget_bytes is not None:
        options["memory_budget_bytes"] = int(memory_budget_bytes)
    try:
        plan = make_plan(profile, length, rate, **options)
    except InputError as error:  # the plan names its own parameters; here they are the records'
        names = {"rate": "record_rate_hz", "rate_hz": "record_rate_hz", "duration": "record_duration_s",
                 "duration_s": "record_duration_s"}
        raise InputError(error.message, names.get(error.source, error.source),
                         names.get(error.location, error.location)) from None
    collected.extend(message for message in plan.warnings if message not in collected)
    for message in collected:
        warnings.warn(message, VibsynthWarning, stacklevel=2)
    entropy = seed_entropy(root_seed_sequence(seed))
    step = progress if progress is not None else (lambda samples: None)
    inline = mapper is None  # progress per chunk here; per record when the records are made elsewhere
    function = functools.partial(_record_severity, plan, entropy, fn[usable], qq, bb, step if inline else None)
    fds = np.full((int(records), fn.size), np.nan)
    ers = np.full((int(records), fn.size), np.nan)
    seconds = plan.total_samples / plan.rate_hz
    for index, (damage, extreme, analysed) in enumerate(map_records(function, int(records), mapper)):
        if not inline:
            step(plan.total_samples)
        fds[index, usable] = damage * (exposure / analysed)
        ers[index, usable] = extreme
        seconds = analysed
    mean, std, p05, p95 = _largest_abs_theory(profile, fn, qq, seconds)
    return SeverityScatter(fn_hz=fn, q=qq, b=bb, duration_s=exposure, record_duration_s=seconds, rate_hz=rate,
                           seed=entropy, amplitude=amplitude, fds=fds, ers_g=ers, expected_ers_g=mean,
                           expected_ers_std_g=std, expected_ers_p05_g=p05, expected_ers_p95_g=p95,
                           warnings=tuple(collected))
