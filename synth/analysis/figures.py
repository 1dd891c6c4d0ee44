"""Figures and the PDF report of a verification: ASD against target, amplitude density, excerpt, RMS over time.

Built with matplotlib's object API (``matplotlib.figure.Figure`` and the Agg
canvas), never pyplot, so nothing global is touched.  The visual style is the
project's own: a warm paper background, the target in charcoal drawn above
everything with its breakpoints as open diamonds, the tolerance band in sand,
the measured estimate in deep teal with its confidence band in pale teal
(edged), the estimate outside the target band dimmed, and lines outside
tolerance as brick-red ticks.

report.pdf has one paper size (A4 595 x 842 pt or US Letter 612 x 792 pt).
Page 1 is a record an engineer can sign: the verdict as a sentence, the target
table (breakpoints, slopes in dB/octave, level applied), the drive (rate,
duration, seed, format, full scale), every criterion with its result in words,
the SHA-256 digests, tool version and date, the drive-file caution and a block
for signatures.  Pages 2-5 hold one figure each with its notes.  Every page
carries its number; the PDF information dictionary carries the title, the
creation date and the producer ``vibsynth X.Y``.

This module never imports the generator or the transforms: the amplitude model
of a non-Gaussian drive (Hermite coefficients or clip level) comes in through
:class:`ReportFacts` (the sidecar's ``transform`` block) and its density is
computed here from the published formulas.

References
----------
Welch (1967); chi-square confidence limits (Bendat & Piersol, Random Data,
4th ed., 2010); Hermite moment models (Winterstein 1988, J. Eng. Mech.
114(10)); ISO 216 (A4), ANSI/ASME Y14.1 (Letter); ISO 32000-1 (PDF).
"""

from __future__ import annotations

import datetime
import math
import os
import textwrap
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Rectangle
from matplotlib.ticker import FixedLocator, NullFormatter

from vibsynth import __version__
from vibsynth.errors import InputError
from vibsynth.io.atomic import AtomicFile, commit_all
from vibsynth.io.caution import DRIVE_CAUTION
from vibsynth.analysis.verify import Verification, floor_percent

PAPER = "#fbf8f1"
INK = "#2b2b2b"
TARGET = "#3a3a3a"
BAND = "#e9d8a6"
MEASURED = "#0b6e69"
CONFIDENCE = "#a8d5cf"
CONFIDENCE_EDGE = "#6fb3aa"
DIMMED = "#a9bcb9"
OUTSIDE = "#b23a25"
MUTED = "#8a8174"
MODEL = "#6d4c8f"
RULE = "#cfc5b0"

_RC = {
    "axes.facecolor": PAPER,
    "figure.facecolor": PAPER,
    "axes.edgecolor": MUTED,
    "axes.labelcolor": INK,
    "xtick.color": INK,
    "ytick.color": INK,
    "grid.color": "#ddd5c4",
    "font.size": 9.5,
}

FIGURE_NAMES = ("asd", "amplitude", "excerpt", "rms")

#: Paper sizes of report.pdf in points (1/72 in): ISO 216 A4 rounded to whole points, US Letter.
PAPER_SIZES_PT = {"a4": (595.0, 842.0), "letter": (612.0, 792.0)}

#: Size of a PNG figure, inches (at 110 dpi: 990 x 616 pixels).
PNG_SIZE_IN = (9.0, 5.6)

#: Each criterion of :meth:`Verification.to_dict` in words, for the report.
CRITERION_WORDS = {
    "asd": "ASD, line by line",
    "asd_bands": "ASD, share per third-octave band",
    "asd_edges": "ASD at band edges and narrow features",
    "crossing_rate": "Zero up-crossing rate",
    "grms": "Overall g RMS",
    "mean": "Mean (offset)",
    "stationarity": "Stationarity (RMS over windows)",
    "gaussian_kurtosis": "Kurtosis of a Gaussian record",
    "gaussian_tail_3_sigma": "Share of samples beyond 3 sigma",
    "gaussian_largest_peak": "Largest sample",
    "kurtosis": "Kurtosis target",
    "skewness": "Skewness target",
    "crest_factor": "Crest factor limit",
}


@dataclass(frozen=True)
class ReportFacts:
    """What the report says about the drive besides the verification (all optional; text as printed).

    Parameters
    ----------
    drive_name : str
        The drive file's name (relative to the report folder when it is there).
    drive_format : str
        Format and sample format, e.g. ``"FLAC, PCM_24"``.
    full_scale : str
        Full scale in words (``"sample 1.0 = 12.3 g ..."`` or ``"values in g"``).
    rate_hz, duration_s : float or None
        Sample rate (Hz) and duration (s) of the file.
    samples, seed : int or None
    amplitude : str
        ``fixed`` or ``rayleigh`` line amplitudes.
    level : str
        The level applied to the profile as written, e.g. ``"-6 dB"``.
    profile_source : str
        File or preset the target came from.
    ramps : str
        Fade-in/out in words ('' for none).
    drive_sha256, sidecar_name, sidecar_sha256 : str
        SHA-256 digests (hex) of the drive and its sidecar.
    tool_version : str
        Version of vibsynth that wrote the report.
    created_utc : str
        ISO 8601 time of the report, UTC.
    model : dict or None
        The sidecar's ``transform`` block (``family`` ``hermite`` with ``c3``,
        ``c4``, ``kappa``, ``form``, ``mean_offset``; or ``clip`` with
        ``clip_level_sigma``, ``clipped_rms_sigma``, ``crest_factor``,
        ``peak_limit_g``), None for a Gaussian drive.

    Examples
    --------
    >>> ReportFacts(level="-6 dB").level
    '-6 dB'

    References
    ----------
    FIPS 180-4 (SHA-256); ISO 8601 (time).
    """

    drive_name: str = ""
    drive_format: str = ""
    full_scale: str = ""
    rate_hz: float | None = None
    duration_s: float | None = None
    samples: int | None = None
    seed: int | None = None
    amplitude: str = ""
    level: str = ""
    profile_source: str = ""
    ramps: str = ""
    drive_sha256: str = ""
    sidecar_name: str = ""
    sidecar_sha256: str = ""
    tool_version: str = ""
    created_utc: str = ""
    model: dict | None = None


# ====================================================================== words and numbers
def frequency_ticks_125(low_hz: float, high_hz: float) -> tuple:
    """Tick values for a log frequency axis at 1-2-5 steps, and the minor ticks between them.

    Parameters
    ----------
    low_hz, high_hz : float
        Axis limits, Hz (> 0).

    Returns
    -------
    major, minor : list of float
        Major ticks ``m x 10^k`` (m in 1, 2, 5) inside the limits; on a span
        under a decade with fewer than three of them, 1-1.5-2-3-4-5-6-8 steps.
        Minor ticks: the other integers ``m x 10^k`` (m = 1...9) inside.

    Examples
    --------
    >>> frequency_ticks_125(10.0, 3000.0)[0]
    [10.0, 20.0, 50.0, 100.0, 200.0, 500.0, 1000.0, 2000.0]

    References
    ----------
    Preferred-number steps 1-2-5 (ISO 3, renard-series practice for scales).
    """
    def inside(mantissas):
        values = []
        for k in range(math.floor(math.log10(low_hz)) - 1, math.ceil(math.log10(high_hz)) + 1):
            for m in mantissas:
                value = float(m * 10.0**k)
                if low_hz * (1 - 1e-9) <= value <= high_hz * (1 + 1e-9):
                    values.append(float(f"{value:.6g}"))
        return sorted(set(values))

    major = inside((1, 2, 5))
    if len(major) < 3:
        major = inside((1, 1.5, 2, 3, 4, 5, 6, 8))
    minor = [v for v in inside(range(1, 10)) if v not in major]
    return major, minor


def criterion_words(name: str) -> str:
    """A criterion key of the verification (``asd_bands``) in words for the report.

    Examples
    --------
    >>> criterion_words("grms")
    'Overall g RMS'

    References
    ----------
    :data:`CRITERION_WORDS`.
    """
    return CRITERION_WORDS.get(name, name.replace("_", " ").capitalize())


def _judged(result: Verification) -> list:
    return [c for c in result.checks if c.get("judged", True)]


def verdict_sentence(result: Verification, most: int | None = None) -> str:
    """The verdict as a sentence: ``meets the target on 9 of 9 criteria`` or what it does not meet.

    ``most`` limits the failed criteria named (the rest counted).

    Examples
    --------
    >>> verdict_sentence.__name__
    'verdict_sentence'

    References
    ----------
    The criteria of :func:`vibsynth.analysis.verify.verify_record`.
    """
    judged = _judged(result)
    met = sum(1 for c in judged if c["pass"])
    if not judged:
        return "meets the target" if result.passed else "does not meet the target"
    if result.passed:
        return f"meets the target on {met} of {len(judged)} criteria"
    missed = [criterion_words(c["name"]) for c in judged if not c["pass"]]
    named = missed if most is None or len(missed) <= most else missed[:most] + [f"{len(missed) - most} more"]
    return (f"does not meet the target: {len(missed)} of {len(judged)} criteria not met ("
            + "; ".join(named) + ")")


def _level(facts) -> str:
    return facts.level if facts is not None and facts.level else "level not recorded"


def _title(result: Verification, facts, title: str) -> str:
    """``PROFILE at LEVEL - FILE``: the profile name and the level in every title."""
    name = facts.drive_name if facts is not None and facts.drive_name else title
    level = _level(facts)
    joiner = " at " if level[:1] in "+-0123456789" else ", "  # "at -6 dB", ", rescaled to 2 g RMS"
    head = f"{result.profile.name}{joiner}{level}"
    return head + (f"  ·  {name}" if name else "")


def out_of_band_grms(result: Verification) -> float:
    """g RMS of the Welch estimate outside the target band (below its lowest and above its highest frequency).

    Examples
    --------
    >>> out_of_band_grms.__name__
    'out_of_band_grms'

    References
    ----------
    Mean square as the integral of the ASD (Parseval), by the rectangle rule over the lines.
    """
    c, e, p = result.comparison, result.estimate, result.profile
    f = c.frequencies_hz
    outside = (f < p.frequency_min_hz) | (f > p.frequency_max_hz)
    return float(math.sqrt(max(0.0, float(np.sum(c.measured_g2_per_hz[outside])) * e.resolution_hz)))


# ====================================================================== amplitude models
def hermite_model_density(block: dict, points: int = 4001) -> tuple:
    """Density of a cubic Hermite transform of a standard normal variable, in standard deviations.

    Parameters
    ----------
    block : dict
        ``c3``, ``c4``, ``kappa``, ``form`` (``softening``: y = kappa (u + c3 (u^2 - 1) + c4 (u^3 - 3u));
        ``hardening``: u = z + c3 (z^2 - 1) + c4 (z^3 - 3z), y = kappa (z - mean_offset)), u standard normal.
    points : int
        Points of the curve.

    Returns
    -------
    z, density : numpy.ndarray
        ``(y - mean)/std`` and the probability density there (1/sigma), the
        mean and standard deviation taken from the curve itself.

    Examples
    --------
    >>> z, p = hermite_model_density({"c3": 0.0, "c4": 0.0, "kappa": 1.0, "form": "softening"})
    >>> round(float(p[np.argmin(abs(z))]), 4)  # the normal density at 0
    0.3989

    References
    ----------
    Winterstein (1988), J. Eng. Mech. 114(10); change of variables p_y = p_u / |dy/du|.
    """
    c3, c4 = float(block.get("c3") or 0.0), float(block.get("c4") or 0.0)
    kappa = float(block.get("kappa") or 1.0)
    t = np.linspace(-8.0, 8.0, points)
    phi = lambda u: np.exp(-0.5 * u * u) / math.sqrt(2 * math.pi)  # noqa: E731
    if block.get("form") == "hardening":
        u = t + c3 * (t * t - 1) + c4 * (t**3 - 3 * t)
        du = 1 + 2 * c3 * t + 3 * c4 * (t * t - 1)
        y = kappa * (t - float(block.get("mean_offset") or 0.0))
        density = phi(u) * np.abs(du) / kappa
        slope = du
    else:
        y = kappa * (t + c3 * (t * t - 1) + c4 * (t**3 - 3 * t))
        slope = kappa * (1 + 2 * c3 * t + 3 * c4 * (t * t - 1))
        density = phi(t) / np.maximum(np.abs(slope), 1e-300)
    # the monotone branch around the centre (the transform is one-to-one there)
    centre = points // 2
    keep = np.zeros(points, dtype=bool)
    i = centre
    while i < points and slope[i] > 0:
        keep[i] = True
        i += 1
    i = centre - 1
    while i >= 0 and slope[i] > 0:
        keep[i] = True
        i -= 1
    y, density = y[keep], density[keep]
    mass = float(np.trapezoid(density, y)) if hasattr(np, "trapezoid") else float(np.trapz(density, y))
    integrate = np.trapezoid if hasattr(np, "trapezoid") else np.trapz
    mean = float(integrate(y * density, y)) / mass
    std = math.sqrt(float(integrate((y - mean) ** 2 * density, y)) / mass)
    return (y - mean) / std, density * std / mass


def _normal_sf(x: float) -> float:
    return 0.5 * math.erfc(x / math.sqrt(2.0))


# ====================================================================== layout helpers
def _figure(width_in: float = PNG_SIZE_IN[0], height_in: float = PNG_SIZE_IN[1]) -> Figure:
    import matplotlib

    with matplotlib.rc_context(_RC):
        figure = Figure(figsize=(width_in, height_in), dpi=110, facecolor=PAPER)
        FigureCanvasAgg(figure)
    return figure


def _axes(figure: Figure, box: tuple, left: float = 0.85, right: float = 0.3, bottom: float = 0.6,
          top: float = 0.95):
    """Axes inside ``box`` (x0, y0, width, height in inches from the figure's lower left), fixed margins in inches."""
    width, height = figure.get_size_inches()
    x0, y0, w, h = box
    ax = figure.add_axes([(x0 + left) / width, (y0 + bottom) / height, (w - left - right) / width,
                          (h - bottom - top) / height])
    style_axes(ax)
    return ax


def style_axes(ax) -> None:
    """The project's axes style (paper, spines, ticks, grid), shared by every figure of the tool.

    Examples
    --------
    >>> from matplotlib.figure import Figure
    >>> style_axes(Figure().add_subplot())

    References
    ----------
    matplotlib's object API (Axes).
    """
    ax.set_facecolor(PAPER)
    ax.set_axisbelow(True)
    for spine in ("top", "right"):
        ax.spines[spine].set_visible(False)
    for spine in ("left", "bottom"):
        ax.spines[spine].set_color(MUTED)
    ax.tick_params(colors=INK, labelsize=8.5)
    ax.grid(True, which="major", color="#ddd5c4", linewidth=0.7)
    ax.grid(True, which="minor", color="#eee7d8", linewidth=0.4)


def _verdict(result: Verification) -> str:
    text = ("PASS: " if result.passed else "FAIL: ") + verdict_sentence(result)
    if len(text) > 105:
        text = ("PASS: " if result.passed else "FAIL: ") + verdict_sentence(result, most=1)
    return text


def _headings(figure: Figure, box: tuple, ax, result: Verification, facts, title: str, detail: str) -> None:
    """Profile, level and file on top; the verdict sentence in colour below it; the figure's key numbers over the axes."""
    width, height = figure.get_size_inches()
    x0, y0, w, h = box
    top = y0 + h
    figure.text((x0 + 0.12) / width, (top - 0.1) / height, _title(result, facts, title), ha="left", va="top",
                fontsize=10.5, color=INK, weight="bold")
    figure.text((x0 + 0.12) / width, (top - 0.34) / height, _verdict(result), ha="left", va="top",
                fontsize=9.5, color=MEASURED if result.passed else OUTSIDE, weight="bold",
                wrap=False)
    ax.set_title(detail, fontsize=8.6, color=INK, loc="left")


def _legend_below(figure: Figure, box: tuple, ax, ncol: int) -> None:
    """Legend outside the data area, under the axes, so it never hides a curve."""
    width, height = figure.get_size_inches()
    x0, y0, w, h = box
    handles, labels = ax.get_legend_handles_labels()
    if w < 8.0:  # a page of the PDF is narrower than a PNG: fewer columns
        ncol = min(ncol, 2)
    if handles:
        figure.legend(handles, labels, loc="lower center", bbox_to_anchor=((x0 + w / 2) / width, y0 / height),
                      ncol=ncol, fontsize=8, frameon=False)


# ====================================================================== the four figures
def _draw_asd(figure: Figure, box: tuple, result: Verification, facts, title: str):
    c, e, criteria = result.comparison, result.estimate, result.criteria
    ax = _axes(figure, box, bottom=1.25 if box[2] >= 8.0 else 1.6)
    profile = result.profile
    f_lo = profile.frequency_min_hz / 1.6
    f_hi = min(profile.frequency_max_hz * 1.6, e.rate_hz / 2)
    f = c.frequencies_hz
    shown = (f >= f_lo) & (f <= f_hi) & (f > 0)
    in_band = shown & (f >= profile.frequency_min_hz) & (f <= profile.frequency_max_hz)
    dense = np.geomspace(profile.frequency_min_hz, profile.frequency_max_hz, 800)
    target = profile.evaluate(dense)
    ax.fill_between(dense, target * 10 ** (criteria.tolerance_low_db / 10),
                    target * 10 ** (criteria.tolerance_high_db / 10), color=BAND, alpha=0.85, lw=0, zorder=1,
                    label=f"tolerance {criteria.tolerance_low_db:+g}/{criteria.tolerance_high_db:+g} dB")
    lower, upper = e.confidence_limits(0.90)
    ax.fill_between(f[in_band], lower[in_band], upper[in_band], facecolor=CONFIDENCE, alpha=0.75,
                    edgecolor=CONFIDENCE_EDGE, lw=0.5, zorder=2,
                    label=f"90 % confidence of the estimate ({e.dof:.0f} dof)")
    measured = c.measured_g2_per_hz
    oob = out_of_band_grms(result)
    for side in (shown & (f < profile.frequency_min_hz), shown & (f > profile.frequency_max_hz)):
        if np.any(side):
            ax.loglog(f[side], measured[side], color=DIMMED, lw=0.9, zorder=3,
                      label="_dimmed")
    ax.plot([], [], color=DIMMED, lw=0.9, label=f"estimate outside the band: {oob:.3g} g RMS")
    ax.loglog(f[in_band], measured[in_band], color=MEASURED, lw=1.1, zorder=4, label="estimate (Welch)")
    ax.loglog(dense, target, color=TARGET, lw=1.5, ls=(0, (6, 3)), zorder=6, label="target")
    ax.plot(profile.frequencies_hz, profile.asd_g2_per_hz, "D", ms=5, mfc=PAPER, mec=TARGET, mew=1.2, zorder=7,
            label="target breakpoints")
    positive = measured[shown]
    positive = positive[positive > 0]
    floor = max(np.min(target) / 100, (np.min(positive) if positive.size else np.min(target)) / 2)
    ceiling = max(np.max(target) * 10 ** (criteria.tolerance_high_db / 10) * 3,
                  (np.max(positive) if positive.size else 0.0) * 2)
    ax.set_ylim(floor, ceiling)
    bad = c.judged & ~c.within
    if np.any(bad):
        values = np.clip(measured[bad], floor * 1.25, ceiling / 1.25)
        ax.plot(f[bad], values, "o", color=OUTSIDE, ms=2.6, mew=0, zorder=5,
                label=f"outside tolerance ({int(np.count_nonzero(bad))} lines; ticks on the axis)")
        ax.plot(f[bad], np.zeros(int(np.count_nonzero(bad))), "|", color=OUTSIDE, ms=7, mew=1.0,
                transform=ax.get_xaxis_transform(), clip_on=False)
    if np.any(c.edge):
        ax.plot(f[c.edge], np.clip(measured[c.edge], floor * 1.25, None), ".", color=MUTED, ms=4, zorder=5,
                label="band-edge lines (judged against the window-smoothed target)")
    if result.mixed is not None:  # tone lines and narrow bands of a mixed-mode record
        from vibsynth.analysis.tones import mark_parts_on_asd

        mark_parts_on_asd(ax, result)
    ax.set_xlim(f_lo, f_hi)
    major, minor = frequency_ticks_125(f_lo, f_hi)
    ax.xaxis.set_major_locator(FixedLocator(major))
    ax.xaxis.set_minor_locator(FixedLocator(minor))
    ax.set_xticks(major, labels=[f"{v:g}" for v in major])
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("ASD (g²/Hz)")
    _headings(figure, box, ax, result, facts, title,
              f"{result.grms_measured:.3g} g RMS measured, {result.grms_target:.3g} g target "
              f"({result.grms_error_percent:+.1f} %); worst line {c.max_deviation_db:+.2f} dB at "
              f"{c.max_deviation_frequency_hz:g} Hz; {e.resolution_hz:.3g} Hz lines, {e.dof:.0f} dof")
    _legend_below(figure, box, ax, ncol=3)
    return ax


def _draw_amplitude(figure: Figure, box: tuple, result: Verification, facts, title: str):
    ax = _axes(figure, box, bottom=1.05)
    edges = np.asarray(result.histogram_edges_sigma)
    density = np.asarray(result.histogram_density)
    width = edges[1] - edges[0]
    centres = 0.5 * (edges[1:] + edges[:-1])
    stats = result.statistics
    filled = np.flatnonzero(density > 0)
    reach = 3.5
    if filled.size:
        reach = max(reach, float(np.max(np.abs(edges[[filled[0], filled[-1] + 1]]))) + 0.4)
    model = facts.model if facts is not None else None
    limits = ()
    if model and model.get("family") == "clip" and model.get("peak_limit_g") and stats.get("std"):
        limits = tuple((sign * float(model["peak_limit_g"]) - stats["mean"]) / stats["std"] for sign in (1, -1))
        reach = max(reach, max(abs(v) for v in limits) + 0.6)
    z = np.linspace(-reach, reach, 800)
    gauss = np.exp(-0.5 * z * z) / math.sqrt(2 * math.pi)
    ax.bar(centres, density, width=width, color=MEASURED, alpha=0.5, lw=0, label="record")
    ax.semilogy(z, gauss, color=TARGET, lw=1.3, ls=(0, (6, 3)), label="Gaussian")
    if model and model.get("family") == "hermite":
        zm, pm = hermite_model_density(model)
        keep = (zm >= -reach) & (zm <= reach)
        ax.semilogy(zm[keep], pm[keep], color=MODEL, lw=1.6,
                    label=f"requested model: Hermite ({model.get('form', '')}; kurtosis "
                          f"{float(model.get('kurtosis', float('nan'))):.3g}, skewness "
                          f"{float(model.get('skewness', 0.0)):+.2g})")
    elif model and model.get("family") == "clip":
        c_level = float(model.get("clip_level_sigma") or 0.0)
        s_c = float(model.get("clipped_rms_sigma") or 1.0)
        zc = np.linspace(-c_level / s_c, c_level / s_c, 400)
        ax.semilogy(zc, s_c * np.exp(-0.5 * (zc * s_c) ** 2) / math.sqrt(2 * math.pi), color=MODEL, lw=1.6,
                    label="requested model: clipped Gaussian")
        share = 100 * _normal_sf(c_level)
        for i, value in enumerate(limits):
            ax.axvline(value, color=OUTSIDE, lw=1.2, ls=(0, (3, 2)),
                       label=(f"clip lines ±{float(model.get('crest_factor', 0)):.3g} x target g RMS "
                              f"({share:.2g} % of samples at each)") if i == 0 else None)
    low = float(np.min(density[filled])) if filled.size else 1e-6
    ax.set_ylim(max(1e-9, low / 3), 1.0)
    ax.set_xlim(-reach, reach)
    ax.set_xlabel("(x - mean) / standard deviation")
    ax.set_ylabel("probability density (1/σ)")
    _headings(figure, box, ax, result, facts, title,
              f"amplitude density: kurtosis {stats['kurtosis']:.3f}, skewness {stats['skewness']:+.3f}, "
              f"crest factor {stats['crest_factor']:.2f}, {stats['samples']} samples")
    _legend_below(figure, box, ax, ncol=2)
    return ax


def _draw_excerpt(figure: Figure, box: tuple, result: Verification, facts, title: str):
    ax = _axes(figure, box, right=0.5)
    stats = result.statistics
    mean, std = stats["mean"], stats["std"]
    t, x = result.excerpt_t_s, result.excerpt_g
    ax.plot(t, x, color=MEASURED, lw=0.7)
    levels = []
    for k in (1, 2, 3):
        for sign in (1, -1):
            ax.axhline(mean + sign * k * std, color=MUTED if k < 3 else OUTSIDE, lw=0.8, ls=(0, (4, 3)))
            levels.append((mean + sign * k * std, f"{sign * k:+d}σ"))
    if x.size:
        i = int(np.argmax(np.abs(x - mean)))
        ax.plot(t[i], x[i], "o", mfc="none", mec=OUTSIDE, ms=9, mew=1.4)
        ax.annotate(
            f"largest |x - mean|: {x[i]:+.3g} g ({abs(x[i] - mean) / std:.2f} σ)",
            (t[i], x[i]), xytext=(12, -4 if x[i] < mean else 4), textcoords="offset points",
            va="top" if x[i] < mean else "bottom", fontsize=8, color=OUTSIDE,
        )
        reach = max(abs(float(np.max(x) - mean)), abs(float(np.min(x) - mean)), 3.2 * std) * 1.12
        ax.set_ylim(mean - reach, mean + reach)
        ax.set_xlim(t[0], t[-1])
    sigma_axis = ax.secondary_yaxis("right")
    sigma_axis.set_yticks([v for v, _ in levels], labels=[label for _, label in levels])
    sigma_axis.tick_params(labelsize=8, colors=INK, length=0)
    sigma_axis.spines["right"].set_visible(False)
    ax.set_xlabel("time (s)")
    ax.set_ylabel("acceleration (g)")
    _headings(figure, box, ax, result, facts, title,
              f"excerpt around the largest sample: {stats['largest_peak_sigma']:.2f} σ (peak {stats['peak']:.3g} g, "
              f"RMS {stats['rms']:.3g} g)")
    return ax


def _draw_rms(figure: Figure, box: tuple, result: Verification, facts, title: str):
    ax = _axes(figure, box, bottom=0.95)
    target = result.grms_target
    tol = result.criteria.grms_tolerance_percent / 100.0
    values = np.asarray(result.window_rms_g)
    offset_s = result.statistics["skipped_start_samples"] / result.statistics["rate_hz"]
    starts = offset_s + (np.arange(values.size) + 0.5) * result.window_s
    ax.axhspan(target * (1 - tol), target * (1 + tol), color=BAND, alpha=0.85, lw=0,
               label=f"target ±{result.criteria.grms_tolerance_percent:g} %")
    ax.axhline(target, color=TARGET, lw=1.2, ls=(0, (6, 3)), label=f"target {target:.3g} g")
    if values.size:
        ax.plot(starts, values, "o-", color=MEASURED, ms=3.5, lw=1.0, label=f"RMS per {result.window_s:.3g} s window")
    ax.set_ylim(0, max(target * (1 + tol), values.max() if values.size else target) * 1.25)
    if result.mixed is not None:  # the record's RMS against the level schedule
        from vibsynth.analysis.tones import draw_schedule_on_rms

        draw_schedule_on_rms(ax, result)
    ax.set_xlabel("time (s)")
    ax.set_ylabel("RMS (g)")
    _headings(figure, box, ax, result, facts, title,
              f"RMS over time: {result.grms_measured:.3g} g overall ({result.grms_error_percent:+.1f} % of target)")
    _legend_below(figure, box, ax, ncol=3)
    return ax


_DRAW = {"asd": _draw_asd, "amplitude": _draw_amplitude, "excerpt": _draw_excerpt, "rms": _draw_rms}


def _png_figure(name: str, result: Verification, title: str, facts) -> Figure:
    figure = _figure()
    _DRAW[name](figure, (0.0, 0.0, *PNG_SIZE_IN), result, facts, title)
    return figure


def asd_figure(result: Verification, title: str = "", facts: ReportFacts | None = None) -> Figure:
    """ASD estimate under the target on log-log axes (1-2-5 frequency ticks), with tolerance and confidence bands.

    The target is drawn above the estimate with its breakpoints marked; the
    estimate outside the target band is dimmed and its g RMS printed.

    Parameters
    ----------
    result : Verification
    title : str
        Heading (e.g. the file name) when ``facts`` does not name the drive.
    facts : ReportFacts, optional
        The level applied and the drive's name for the title.

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> asd_figure.__name__
    'asd_figure'

    References
    ----------
    Welch (1967) estimate; chi-square confidence limits (Bendat & Piersol 2010).
    """
    return _png_figure("asd", result, title, facts)


def amplitude_figure(result: Verification, title: str = "", facts: ReportFacts | None = None) -> Figure:
    """Amplitude probability density of the record (log scale, sized to the data) with the Gaussian and the requested model.

    Examples
    --------
    >>> amplitude_figure.__name__
    'amplitude_figure'

    References
    ----------
    Normal density phi(z) = exp(-z^2/2)/sqrt(2 pi); Hermite model: Winterstein (1988).
    """
    return _png_figure("amplitude", result, title, facts)


def excerpt_figure(result: Verification, title: str = "", facts: ReportFacts | None = None) -> Figure:
    """The record around its largest sample, with +/-1, 2, 3 sigma lines (g against s).

    Examples
    --------
    >>> excerpt_figure.__name__
    'excerpt_figure'

    References
    ----------
    Sample mean and standard deviation.
    """
    return _png_figure("excerpt", result, title, facts)


def rms_figure(result: Verification, title: str = "", facts: ReportFacts | None = None) -> Figure:
    """RMS of successive windows against the target g RMS and its tolerance (stationarity).

    Examples
    --------
    >>> rms_figure.__name__
    'rms_figure'

    References
    ----------
    Bendat & Piersol (2010), tests for stationarity.
    """
    return _png_figure("rms", result, title, facts)


# ====================================================================== the PDF pages
class _Page:
    """A paper-size page written top-down in inches: text lines, rules, a footer with the page number."""

    def __init__(self, paper: str, margin_in: float = 0.65):
        width_pt, height_pt = PAPER_SIZES_PT[paper]
        self.width, self.height = width_pt / 72.0, height_pt / 72.0
        self.figure = _figure(self.width, self.height)
        self.margin = margin_in
        self.y = self.height - margin_in  # the cursor, inches from the bottom

    @property
    def inner(self) -> float:
        return self.width - 2 * self.margin

    def text(self, x_in: float, text: str, size: float = 8.0, dy: float | None = None, **kwargs):
        """One text line at ``x_in`` (from the left margin) on the cursor line; move down by ``dy`` (inches)."""
        self.figure.text((self.margin + x_in) / self.width, self.y / self.height, text, ha=kwargs.pop("ha", "left"),
                         va="top", fontsize=size, color=kwargs.pop("color", INK), **kwargs)
        if dy is not None:
            self.y -= dy

    def rule(self, colour: str = RULE, width: float = 0.6, x0: float = 0.0, x1: float | None = None):
        x1 = self.inner if x1 is None else x1
        self.figure.add_artist(Line2D([(self.margin + x0) / self.width, (self.margin + x1) / self.width],
                                      [self.y / self.height] * 2, color=colour, lw=width))

    def box(self, x0: float, y_top: float, w: float, h: float, edge: str, face: str = "none", lw: float = 1.0):
        self.figure.add_artist(Rectangle(((self.margin + x0) / self.width, (y_top - h) / self.height),
                                         w / self.width, h / self.height, transform=self.figure.transFigure,
                                         edgecolor=edge, facecolor=face, lw=lw))

    def footer(self, left: str, page: int, pages: int):
        y = self.margin * 0.6 / self.height
        self.figure.text(self.margin / self.width, y, left, ha="left", va="bottom", fontsize=7, color=MUTED)
        self.figure.text(1 - self.margin / self.width, y, f"page {page} of {pages}", ha="right", va="bottom",
                         fontsize=7.5, color=INK)


def _wrap(text: str, width: int) -> list:
    return textwrap.wrap(" ".join(str(text).split()), width) or [""]


def _fmt(value, spec: str = "g", unit: str = "", missing: str = "not recorded") -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return missing
    return f"{value:{spec}}{unit}"


def _target_rows(profile) -> list:
    """(frequency Hz, ASD g^2/Hz, slope dB/octave to the next breakpoint) per breakpoint."""
    f, s = np.asarray(profile.frequencies_hz, float), np.asarray(profile.asd_g2_per_hz, float)
    rows = []
    for i in range(f.size):
        if i + 1 < f.size:
            slope = 10 * math.log10(s[i + 1] / s[i]) / math.log2(f[i + 1] / f[i]) if s[i] > 0 and s[i + 1] > 0 else None
            slope_text = "—" if slope is None else ("flat" if abs(slope) < 0.005 else f"{slope:+.2f}")
        else:
            slope_text = ""
        rows.append((f"{f[i]:g}", f"{s[i]:.4g}", slope_text))
    return rows


def summary_figure(result: Verification, title: str = "", lines: tuple = (), facts: ReportFacts | None = None,
                   paper: str = "a4", pages: int = 5) -> Figure:
    """Page 1 of report.pdf: the record an engineer can sign.

    The verdict as a sentence; the target table (breakpoints, slopes in
    dB/octave, level applied); the drive (rate, duration, seed, format, full
    scale); every criterion and its result in words; SHA-256 digests, tool
    version and date; the drive-file caution; lines for signatures.

    Parameters
    ----------
    result : Verification
    title : str
        The drive file's label when ``facts`` does not name it.
    lines : tuple of str
        More lines (notes) for the page.
    facts : ReportFacts, optional
    paper : {"a4", "letter"}
    pages : int
        Pages of the whole report (for "page 1 of N").

    Returns
    -------
    matplotlib.figure.Figure
        Of the paper's size.

    Examples
    --------
    >>> summary_figure.__name__
    'summary_figure'

    References
    ----------
    ISO 216 (A4), ANSI/ASME Y14.1 (Letter); FIPS 180-4 (SHA-256); ISO 8601.
    """
    facts = facts or ReportFacts()
    page = _Page(paper)
    profile, d = result.profile, result.to_dict()
    inner = page.inner
    # ---- heading
    page.text(0, "Random-vibration drive: verification record", 14, weight="bold", dy=0.3)
    page.text(0, _title(result, facts, title), 9.5, dy=0.22)
    page.rule(INK, 1.0)
    page.y -= 0.12
    # ---- verdict
    colour = MEASURED if result.passed else OUTSIDE
    sentence = ("PASS: the drive " if result.passed else "FAIL: the drive ") + verdict_sentence(result)
    verdict_lines = _wrap(sentence, 70)
    height = 0.16 + 0.21 * len(verdict_lines)
    page.box(0, page.y, inner, height, colour, lw=1.6)
    page.y -= 0.08
    for line in verdict_lines:
        page.text(0.12, line, 11, dy=0.21, color=colour, weight="bold")
    page.y -= 0.22
    # ---- target table (left) and drive facts (right)
    top = page.y
    page.text(0, "Target", 9.5, weight="bold", dy=0.2)
    page.text(0, "frequency (Hz)", 7.5, color=MUTED)
    page.text(1.05, "ASD (g²/Hz)", 7.5, color=MUTED)
    page.text(1.95, "slope to next (dB/octave)", 7.5, color=MUTED, dy=0.16)
    page.rule(RULE, 0.5, 0, 3.4)
    page.y -= 0.04
    rows = _target_rows(profile)
    most = 14
    for row in rows[:most]:
        page.text(0.0, row[0], 8, family="monospace")
        page.text(1.05, row[1], 8, family="monospace")
        page.text(1.95, row[2], 8, family="monospace", dy=0.155)
    if len(rows) > most:
        page.text(0, f"... {len(rows) - most} more breakpoints in profile.toml", 7.5, color=MUTED, dy=0.155)
    page.rule(RULE, 0.5, 0, 3.4)
    page.y -= 0.05
    band = f"{profile.frequency_min_hz:g}-{profile.frequency_max_hz:g} Hz"
    for label, value in (("level applied", _level(facts)), ("band", band),
                         ("target g RMS", f"{profile.grms:.4g} g"),
                         ("profile", profile.name + (f" ({facts.profile_source})" if facts.profile_source
                                                     and facts.profile_source != profile.name else ""))):
        page.text(0, label, 7.5, color=MUTED)
        page.text(1.05, value, 8, dy=0.155)
    left_bottom = page.y
    page.y = top
    x = 3.75
    page.text(x, "Drive", 9.5, weight="bold", dy=0.2)
    dur = facts.duration_s if facts.duration_s is not None else d["statistics"].get("duration_s")
    rate = facts.rate_hz if facts.rate_hz is not None else d["statistics"].get("rate_hz")
    model = facts.model or {}
    if model.get("family") == "hermite":
        amplitude_model = (f"Hermite transform, kurtosis {float(model.get('kurtosis', 0)):.3g}, "
                           f"skewness {float(model.get('skewness', 0)):+.2g}")
    elif model.get("family") == "clip":
        amplitude_model = f"clipped at {float(model.get('crest_factor', 0)):.3g} x target g RMS"
    else:
        amplitude_model = "Gaussian"
    drive_rows = [
        ("file", facts.drive_name or title or "not recorded"),
        ("format", facts.drive_format or "not recorded"),
        ("full scale", facts.full_scale or "not recorded"),
        ("sample rate", _fmt(rate, "g", " Hz")),
        ("duration", _fmt(dur, ".6g", " s") + (f" ({facts.samples} samples)" if facts.samples else "")),
        ("seed", _fmt(facts.seed, "d")),
        ("line amplitudes", facts.amplitude or "not recorded"),
        ("amplitude model", amplitude_model),
        ("ramps", facts.ramps or "none"),
        ("ASD estimate", f"Welch, Hann, 50 % overlap: {d['asd']['resolution_hz']:.3g} Hz lines, "
                         f"{d['asd']['dof']:.0f} dof"),
        ("outside the band", f"{out_of_band_grms(result):.3g} g RMS in the estimate"),
    ]
    for label, value in drive_rows:
        wrapped = _wrap(value, 40)
        page.text(x, label, 7.5, color=MUTED)
        for line in wrapped:
            page.text(x + 1.05, line, 8, dy=0.155)
    page.y = min(page.y, left_bottom) - 0.15
    # ---- criteria
    page.text(0, "Criteria", 9.5, weight="bold", dy=0.2)
    page.text(0, "criterion", 7.5, color=MUTED)
    page.text(2.5, "result", 7.5, color=MUTED)
    page.text(3.2, "measured against the limit", 7.5, color=MUTED, dy=0.16)
    page.rule(RULE, 0.5)
    page.y -= 0.04
    for check in result.checks:
        judged = check.get("judged", True)
        verdict = "met" if check["pass"] else ("NOT MET" if judged else "reported only")
        tint = MEASURED if check["pass"] else (OUTSIDE if judged else MUTED)
        wrapped = _wrap(check["summary"], 76)
        page.text(0, criterion_words(check["name"]), 8)
        page.text(2.5, verdict, 8, color=tint, weight="bold")
        for line in wrapped:
            page.text(3.2, line, 7.3, dy=0.14)
        page.y -= 0.02
    page.rule(RULE, 0.5)
    page.y -= 0.08
    for line in list(lines) + ([d["asd"]["dof_note"]] if d["asd"]["dof_note"] else []):
        for part in _wrap(line, 120):
            page.text(0, part, 7.3, dy=0.14)
    # ---- integrity
    page.y -= 0.06
    page.text(0, "Files and provenance", 9.5, weight="bold", dy=0.2)
    for label, value in (("drive SHA-256", f"{facts.drive_sha256 or 'not computed'}  {facts.drive_name}"),
                         ("sidecar SHA-256", f"{facts.sidecar_sha256 or 'not computed'}  {facts.sidecar_name}")):
        page.text(0, label, 7.5, color=MUTED)
        page.text(1.25, value, 7.2, family="monospace", dy=0.15)
    written = facts.created_utc or datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")
    page.text(0, "written by", 7.5, color=MUTED)
    page.text(1.25, f"vibsynth {facts.tool_version or __version__}, {written} (UTC)", 8, dy=0.2)
    # ---- caution
    caution = _wrap(DRIVE_CAUTION, 112)
    height = 0.12 + 0.145 * len(caution)
    page.box(0, page.y, inner, height, OUTSIDE, face="#f6ebe4", lw=0.8)
    page.y -= 0.06
    for line in caution:
        page.text(0.1, line, 7.6, dy=0.145)
    page.y -= 0.22
    # ---- signatures
    page.text(0, "Approval", 9.5, weight="bold", dy=0.32)
    for role in ("Prepared by", "Checked by"):
        page.text(0, role, 8)
        page.y -= 0.02
        for x0, x1, label in ((1.0, 3.3, "name"), (3.5, 5.9, "signature"), (6.1, inner, "date")):
            page.rule(INK, 0.6, x0, x1)
            keep = page.y
            page.y -= 0.03
            page.text(x0, label, 6.5, color=MUTED)
            page.y = keep
        page.y -= 0.42
    page.footer(f"{_title(result, facts, title)}  ·  vibsynth {facts.tool_version or __version__}", 1, pages)
    return page.figure


def _notes(name: str, result: Verification, facts) -> list:
    """What a figure page says below its figure."""
    d = result.to_dict()
    a, s = d["asd"], d["statistics"]
    checks = {c["name"]: c for c in result.checks}

    def said(key):
        c = checks.get(key)
        if c is None:
            return []
        mark = "met" if c["pass"] else ("NOT MET" if c.get("judged", True) else "reported only")
        return [f"{criterion_words(key)} ({mark}): {c['summary']}"]

    if name == "asd":
        notes = [f"Welch estimate: Hann window, 50 % overlap, {a['segments']} segments, {a['dof']:.0f} degrees of "
                 f"freedom, {a['resolution_hz']:.4g} Hz lines; a line's 90 % confidence interval spans "
                 f"{a['confidence_90_percent_db'][0]:+.2f}/{a['confidence_90_percent_db'][1]:+.2f} dB.",
                 f"{a['lines_judged']} lines judged, {floor_percent(a['fraction_within_tolerance'])} % within "
                 f"{a['tolerance_db'][0]:+g}/{a['tolerance_db'][1]:+g} dB; {a['lines_near_edge_not_judged']} lines "
                 f"within {a['edge_exclusion_resolutions']:g} line widths of a band edge are judged against the "
                 "target seen through the window.",
                 f"Outside the target band the estimate holds {out_of_band_grms(result):.3g} g RMS (dimmed curve)."]
        if a["outside_ranges_hz"]:
            notes.append("Outside tolerance at " + ", ".join(
                f"{lo:g} Hz" if lo == hi else f"{lo:g}-{hi:g} Hz" for lo, hi in a["outside_ranges_hz"][:8]) + ".")
        for key in ("asd", "asd_bands", "asd_edges", "crossing_rate", "grms"):
            notes += said(key)
        if a["dof_note"]:
            notes.append(a["dof_note"])
        return notes
    if name == "amplitude":
        notes = [f"Mean {s['mean']:+.3g} g, RMS {s['rms']:.4g} g, skewness {s['skewness']:+.3f}, kurtosis "
                 f"{s['kurtosis']:.3f}, peak {s['peak']:.4g} g, crest factor {s['crest_factor']:.3f}."]
        notes.append("Share of samples beyond k sigma (Gaussian in brackets): " + ", ".join(
            f"{e['k_sigma']:g} σ {100 * e['measured_fraction']:.3g} % ({100 * e['gaussian_fraction']:.3g} %)"
            for e in s["exceedance"]) + ".")
        model = facts.model if facts is not None else None
        if model and model.get("family") == "hermite":
            notes.append(f"Requested model: cubic Hermite transform ({model.get('form')}), c3 "
                         f"{float(model.get('c3', 0)):+.4g}, c4 {float(model.get('c4', 0)):+.4g}, kappa "
                         f"{float(model.get('kappa', 1)):.4g}; its density computed from these coefficients.")
        elif model and model.get("family") == "clip":
            notes.append(f"Requested model: Gaussian stream clipped at {float(model.get('clip_level_sigma', 0)):.4g} σ "
                         f"and rescaled, so no sample exceeds {float(model.get('crest_factor', 0)):.3g} x the target "
                         f"g RMS ({_fmt(model.get('peak_limit_g'), '.4g', ' g')}).")
        for key in ("mean", "kurtosis", "skewness", "crest_factor", "gaussian_kurtosis", "gaussian_tail_3_sigma"):
            notes += said(key)
        return notes
    if name == "excerpt":
        notes = [f"Largest |x - mean| {s['largest_peak_sigma']:.2f} σ over {s['duration_s']:.4g} s."]
        if s.get("expected_peak_sampled_sigma"):
            notes.append(f"A Gaussian record of this length sampled at this rate: {s['expected_peak_sampled_sigma']:.2f}"
                         f" ± {s['expected_peak_sampled_std_sigma']:.2f} σ expected.")
        if s.get("davenport_expected_peak_sigma"):
            notes.append(f"Davenport, continuous signal: {s['davenport_expected_peak_sigma']:.2f} ± "
                         f"{s['davenport_peak_std_sigma']:.2f} σ.")
        return notes + said("gaussian_largest_peak") + said("crest_factor")
    notes = [f"RMS of {len(result.window_rms_g)} successive windows of {result.window_s:.3g} s against the target g RMS "
             f"and its ±{result.criteria.grms_tolerance_percent:g} % tolerance."]
    return notes + said("stationarity") + said("grms") + said("mean")


def figure_page(name: str, result: Verification, title: str = "", facts: ReportFacts | None = None,
                paper: str = "a4", page_number: int = 2, pages: int = 5) -> Figure:
    """A page of report.pdf: one figure on the paper size, its notes below, the page number.

    Parameters
    ----------
    name : {"asd", "amplitude", "excerpt", "rms"}
    result : Verification
    title : str
    facts : ReportFacts, optional
    paper : {"a4", "letter"}
    page_number, pages : int

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> figure_page.__name__
    'figure_page'

    References
    ----------
    See the figure functions.
    """
    page = _Page(paper)
    height = 5.8
    box = (page.margin - 0.1, page.y - height, page.inner + 0.2, height)
    _DRAW[name](page.figure, box, result, facts, title)
    page.y -= height + 0.25
    page.rule(RULE, 0.6)
    page.y -= 0.1
    for note in _notes(name, result, facts):
        for line in _wrap(note, 118):
            page.text(0, line, 8, dy=0.16)
        page.y -= 0.06
    page.footer(f"{_title(result, facts, title)}  ·  vibsynth {__version__}", page_number, pages)
    return page.figure


def pdf_metadata(result: Verification, title: str = "", facts: ReportFacts | None = None) -> dict:
    """The PDF information dictionary of report.pdf: Title, Subject, Producer ``vibsynth X.Y``, CreationDate.

    Examples
    --------
    >>> pdf_metadata.__name__
    'pdf_metadata'

    References
    ----------
    ISO 32000-1, 14.3.3 (document information dictionary).
    """
    created = datetime.datetime.now(datetime.timezone.utc)
    if facts is not None and facts.created_utc:
        try:
            created = datetime.datetime.fromisoformat(facts.created_utc)
        except ValueError:
            pass
    return {
        "Title": f"Verification record: {_title(result, facts, title)}",
        "Subject": ("PASS: " if result.passed else "FAIL: ") + verdict_sentence(result),
        "Creator": f"vibsynth {__version__}",
        "Producer": f"vibsynth {__version__}",
        "CreationDate": created,
    }


def image_page(image_path: str | os.PathLike, result: Verification, title: str = "", facts: ReportFacts | None = None,
               paper: str = "a4", page_number: int = 6, pages: int = 7, notes: tuple = ()) -> Figure:
    """A page of report.pdf holding a figure made elsewhere (a PNG file), its notes below, the page number.

    Lets other parts of the package (the durability pages: FDS and ERS) join the
    report without this module importing them.

    Parameters
    ----------
    image_path : str or os.PathLike
        PNG file to place, scaled to the page width (aspect kept).
    result : Verification
        For the footer's title.
    title : str
    facts : ReportFacts, optional
    paper : {"a4", "letter"}
    page_number, pages : int
    notes : tuple of str
        Paragraphs below the figure.

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> image_page.__name__
    'image_page'

    References
    ----------
    PNG: ISO/IEC 15948:2004.
    """
    from matplotlib.image import imread

    image = imread(str(image_path))
    page = _Page(paper)
    rows, columns = image.shape[:2]
    width = page.inner
    height = min(width * rows / columns, page.y - page.margin - 2.0)
    width = height * columns / rows
    left = page.margin + (page.inner - width) / 2
    ax = page.figure.add_axes((left / page.width, (page.y - height) / page.height, width / page.width,
                               height / page.height))
    ax.imshow(image, interpolation="lanczos")
    ax.set_axis_off()
    page.y -= height + 0.25
    page.rule(RULE, 0.6)
    page.y -= 0.1
    for note in notes:
        for line in _wrap(note, 118):
            page.text(0, line, 8, dy=0.16)
        page.y -= 0.06
    page.footer(f"{_title(result, facts, title)}  ·  vibsynth {__version__}", page_number, pages)
    return page.figure


def write_report_figures(result: Verification, folder: str | os.PathLike, title: str = "", extra_lines: tuple = (),
                         facts: ReportFacts | None = None, paper: str = "a4", extra_pages: tuple = ()) -> dict:
    """Write the four figures as PNG and the report (page 1 to sign, then one figure a page) as one PDF, atomically.

    Each file is written under a temporary name in ``folder`` and renamed when
    complete, so an interrupted run leaves no half-written figure.

    Parameters
    ----------
    result : Verification
    folder : path
        Existing folder.
    title : str
        Heading for every page (e.g. the drive file's name) when ``facts`` does not name the drive.
    extra_lines : tuple of str
        More lines for page 1.
    facts : ReportFacts, optional
        The drive, its digests, the level applied, the amplitude model.
    paper : {"a4", "letter"}
        Paper size of every PDF page.
    extra_pages : tuple of (path, tuple of str)
        More pages after the figure pages: a PNG file made elsewhere (e.g. the
        FDS and ERS figures) and the notes printed below it (see :func:`image_page`).

    Returns
    -------
    dict
        Name -> written path: ``asd``, ``amplitude``, ``excerpt``, ``rms`` (PNG), ``pdf``.

    Raises
    ------
    InputError
        When ``folder`` is not an existing folder, or ``paper`` is not a known size.

    Examples
    --------
    >>> write_report_figures.__name__
    'write_report_figures'

    References
    ----------
    See the individual figure functions.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"report folder {str(folder)!r} does not exist or is not a folder; create it first",
                         location="report_dir")
    paper = str(paper).lower()
    if paper not in PAPER_SIZES_PT:
        raise InputError(f"paper size {paper!r} is not known; give a4 or letter", location="paper")
    extra_pages = tuple(extra_pages)
    pages = 1 + len(FIGURE_NAMES) + len(extra_pages)
    written = {}
    pending = []
    try:
        for name in FIGURE_NAMES:
            figure = _png_figure(name, result, title, facts)
            pending.append(AtomicFile(folder / f"{name}.png"))
            figure.savefig(pending[-1].temporary, format="png", facecolor=PAPER)
            written[name] = pending[-1]
        pending.append(AtomicFile(folder / "report.pdf"))
        with PdfPages(pending[-1].temporary, metadata=pdf_metadata(result, title, facts)) as pdf:
            pdf.savefig(summary_figure(result, title, extra_lines, facts, paper, pages), facecolor=PAPER)
            for number, name in enumerate(FIGURE_NAMES, start=2):
                pdf.savefig(figure_page(name, result, title, facts, paper, number, pages), facecolor=PAPER)
            for number, (image, notes) in enumerate(extra_pages, start=2 + len(FIGURE_NAMES)):
                pdf.savefig(image_page(image, result, title, facts, paper, number, pages, tuple(notes)),
                            facecolor=PAPER)
        written["pdf"] = pending[-1]
        commit_all(written.values())
    finally:
        for file in pending:
            file.discard()
    return {name: str(file.destination) for name, file in written.items()}
