"""One call per durability page: what ``vibsynth severity`` and ``vibsynth fit`` compute, for any caller.

These bundle the steps (open the drive, compute, write the figures) so that
other commands (a run, a verification report) can add the FDS/ERS page or the
shaker check with one call.

References
----------
See :mod:`vibsynth.durability.damage` and :mod:`vibsynth.durability.shaker`.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np

from vibsynth.durability.damage import DEFAULT_B, natural_frequency_grid, profile_severity, drive_severity
from vibsynth.durability.sdof import DEFAULT_Q
from vibsynth.errors import InputError, VibsynthWarning

__all__ = ["DRIVE_FN_FRACTION", "severity_report", "fit_report"]

#: The drive's FDS is computed for natural frequencies up to this fraction of its sample rate.  Rainflow
#: counts the sampled response, whose peaks fall between samples; at b = 8 the lost height costs damage:
#: against a 16x band-limited upsampled response, -0.9 % at 0.10 x rate, -6 % at 0.17, -15 % at 0.23 and
#: -31 % at 0.30 (an independent check with its own filter and rainflow counter).  Above 0.1 x rate the
#: drive's damage would be under-estimated (non-conservative), so it is not given there.
DRIVE_FN_FRACTION = 0.1


def severity_report(profile, duration_s: float, *, drive_path=None, report_dir=None, fn_hz=None,
                    q: float = DEFAULT_Q, b: float = DEFAULT_B, rate_hz=None, scale=None, scatter=None) -> dict:
    """FDS and ERS of a profile, of a drive file and of synthesized records when given, as plain data (and figures).

    Parameters
    ----------
    profile : AsdProfile
        The specification, g^2/Hz.
    duration_s : float
        Exposure the specification stands for, s.
    drive_path : str or os.PathLike, optional
        Drive file; its steady part (between the sidecar's ramps) is analysed
        for natural frequencies up to 0.1 x its sample rate, and its damage is
        scaled by ``duration_s / drive duration`` (damage grows linearly in time).
    report_dir : str or os.PathLike, optional
        Folder for ``fds.png`` and ``ers.png`` (created if missing).
    fn_hz : array_like, optional
        Natural frequencies, Hz (default: 40 log-spaced over the profile's band).
    q, b : float
        Amplification and Basquin exponent (defaults 10 and 8, common practice, no source).
    rate_hz, scale : float, optional
        For drive files that cannot tell their rate or full scale.
    scatter : vibsynth.scatter.SeverityScatter, optional
        FDS/ERS of synthesized records (:func:`vibsynth.scatter.severity_scatter`
        over the same ``fn_hz``, ``q``, ``b`` and ``duration_s``): their keys
        join the data and their scatter band the figures.

    Returns
    -------
    dict
        Keys ``fn_hz``, ``fds_narrowband``, ``fds_dirlik``, ``ers_g`` and, with a
        drive, ``fds_drive`` (scaled to ``duration_s``; NaN above 0.1 x rate),
        ``fds_drive_unscaled``, ``fds_drive_to_narrowband``, ``ers_drive_g``,
        ``ers_g_over_drive_duration``, ``drive_duration_s``, ``drive_rate_hz``;
        with ``scatter``, the keys of :meth:`vibsynth.scatter.SeverityScatter.to_dict`
        (``records``, ``fds_records_mean``, ``ers_records_mean_g``, ...);
        ``figures`` (paths) with ``report_dir``.

    Warns
    -----
    VibsynthWarning
        When natural frequencies above 0.1 x the drive's rate are left out.

    Examples
    --------
    >>> from vibsynth.profile.asd import AsdProfile
    >>> data = severity_report(AsdProfile([20.0, 2000.0], [0.01, 0.01]), 3600.0, fn_hz=[100.0, 400.0])
    >>> sorted(k for k in data if k.startswith("fds"))
    ['fds_dirlik', 'fds_narrowband']

    References
    ----------
    Lalanne, vol. 5; Dirlik (1985); Smallwood (1981); ASTM E1049-85 (2017).
    """
    from vibsynth.io.drivefile import open_drive

    if fn_hz is None:
        fn = natural_frequency_grid(profile.frequency_min_hz, profile.frequency_max_hz, 40)
    else:
        fn = np.atleast_1d(np.asarray(fn_hz, dtype=np.float64))
    spec = profile_severity(profile, duration_s, fn, q=q, b=b)
    data = {"profile": profile.name, **spec.to_dict()}
    drive = None
    if drive_path is not None:
        opened = open_drive(drive_path, rate_hz=rate_hz, scale=scale)
        usable = fn <= DRIVE_FN_FRACTION * opened.rate_hz
        if not usable.any():
            raise InputError(f"sample rate {opened.rate_hz:g} Hz is too low for natural frequencies from "
                             f"{fn.min():g} Hz (the drive's FDS needs fn <= {DRIVE_FN_FRACTION} x rate)", str(drive_path))
        if not usable.all():
            warnings.warn(f"the drive's FDS/ERS is computed up to {DRIVE_FN_FRACTION} x its sample rate "
                          f"({DRIVE_FN_FRACTION * opened.rate_hz:g} Hz); higher natural frequencies are left out (there the sampled peaks under-estimate the damage: give a rate of 10 x the highest fn)",
                          VibsynthWarning, stacklevel=2)
        start, stop = opened.steady_range
        drive = drive_severity(opened.iter_chunks(1 << 16, start, stop), opened.rate_hz, fn[usable], q=q, b=b)
        factor = float(duration_s) / drive.duration_s
        blank = np.full(fn.size, np.nan)
        fds_drive, raw, ers_drive = blank.copy(), blank.copy(), blank.copy()
        fds_drive[usable] = drive.fds * factor
        raw[usable] = drive.fds
        ers_drive[usable] = drive.ers_g
        short = profile_severity(profile, drive.duration_s, fn, q=q, b=b)
        data.update({
            "drive": str(drive_path),
            "drive_duration_s": drive.duration_s,
            "drive_rate_hz": opened.rate_hz,
            "drive_damage_scale": factor,
            "fds_drive": fds_drive.tolist(),
            "fds_drive_unscaled": raw.tolist(),
            "fds_drive_to_narrowband": (fds_drive / spec.fds_narrowband).tolist(),
            "ers_drive_g": ers_drive.tolist(),
            "ers_g_over_drive_duration": short.ers_g.tolist(),
        })
    if scatter is not None:
        if scatter.fn_hz.shape != fn.shape or not np.array_equal(scatter.fn_hz, fn) or scatter.q != spec.q \
                or scatter.b != spec.b or scatter.duration_s != spec.duration_s:
            raise InputError("scatter must be computed over the same natural frequencies, q, b and duration",
                             location="scatter")
        data.update(scatter.to_dict(spec.fds_narrowband, spec.fds_dirlik))
    if report_dir is not None:
        from vibsynth.durability.figures import write_severity_figures

        folder = Path(report_dir)
        if folder.exists() and not folder.is_dir():
            raise InputError("exists and is not a folder", str(folder))
        folder.mkdir(parents=True, exist_ok=True)
        written = write_severity_figures(
            folder, spec, drive, label=profile.name,
            drive_fds_scaled=None if drive is None else drive.fds * data["drive_damage_scale"],
            ers_over_drive_duration_g=None if drive is None else np.asarray(data["ers_g_over_drive_duration"]),
            scatter=scatter)
        data["figures"] = [str(p) for p in written]
    return data


def fit_report(profile, shaker_path, *, payload_kg: float = 0.0, drive_path=None, rate_hz=None, scale=None):
    """Shaker fit of a profile (and of a drive file's actual peaks) against a rig file.

    Parameters
    ----------
    profile : AsdProfile
        The test ASD, g^2/Hz.
    shaker_path : str or os.PathLike
        RIG.toml (see :func:`vibsynth.durability.shaker.read_shaker`).
    payload_kg : float
        Test item mass, kg.
    drive_path : str or os.PathLike, optional
        Drive file whose actual peaks (whole file, ramps included) join the
        demands; read chunk by chunk (bounded memory).
    rate_hz, scale : float, optional
        For drive files that cannot tell their rate or full scale.

    Returns
    -------
    vibsynth.durability.shaker.FitResult

    Examples
    --------
    >>> import tempfile, os
    >>> from vibsynth.profile.asd import AsdProfile
    >>> rig = ('rated_force_rms_n = 8000\\nstroke_pk_pk_mm = 51\\nvelocity_peak_m_s = 1.8\\n'
    ...        'acceleration_peak_g = 60\\nmoving_mass_kg = 12\\n')
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     path = os.path.join(folder, "rig.toml")
    ...     _ = open(path, "w").write(rig)
    ...     fit_report(AsdProfile([20.0, 2000.0], [0.01, 0.01]), path, payload_kg=3.0).fits
    True

    References
    ----------
    See :mod:`vibsynth.durability.shaker`.
    """
    from vibsynth.io.drivefile import open_drive
    from vibsynth.durability.shaker import drive_motion_peaks, read_shaker, shaker_fit

    rig = read_shaker(shaker_path)
    peaks = None
    if drive_path is not None:
        opened = open_drive(drive_path, rate_hz=rate_hz, scale=scale)
        peaks = drive_motion_peaks(opened.iter_chunks(1 << 16), opened.rate_hz, 0.5 * profile.frequency_min_hz)
    return shaker_fit(profile, rig, payload_kg=payload_kg, drive_peaks=peaks)
