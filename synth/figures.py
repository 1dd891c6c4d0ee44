"""Figures of a verification: ASD against target, amplitude density, excerpt, RMS over time.

Built with matplotlib's object API (``matplotlib.figure.Figure`` and the Agg
canvas), never pyplot, so nothing global is touched.  The visual style is the
project's own: a warm paper background, the target in charcoal, the tolerance
band in sand, the measured estimate in deep teal with its confidence band in
pale teal, and lines outside tolerance as brick-red ticks.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure

from synth.verify import Verification

PAPER = "#fbf8f1"
INK = "#2b2b2b"
TARGET = "#3a3a3a"
BAND = "#e9d8a6"
MEASURED = "#0b6e69"
CONFIDENCE = "#a8d5cf"
OUTSIDE = "#b23a25"
MUTED = "#8a8174"

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


def _figure(width_in: float = 9.0, height_in: float = 5.2) -> Figure:
    import matplotlib

    with matplotlib.rc_context(_RC):
        figure = Figure(figsize=(width_in, height_in), dpi=110, facecolor=PAPER)
        FigureCanvasAgg(figure)
    return figure


def _style(ax):
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
    return "PASS" if result.passed else "FAIL: " + ", ".join(result.failed)


def asd_figure(result: Verification, title: str = "") -> Figure:
    """ASD estimate over the target on log-log axes, with tolerance and confidence bands.

    Parameters
    ----------
    result : Verification
    title : str
        Heading (e.g. the file name).

    Returns
    -------
    matplotlib.figure.Figure

    References
    ----------
    Welch (1967) estimate; chi-square confidence limits (Bendat & Piersol 2010).
    """
    c, e, criteria = result.comparison, result.estimate, result.criteria
    figure = _figure()
    ax = figure.add_subplot(1, 1, 1)
    _style(ax)
    profile = result.profile
    f_lo = profile.frequency_min_hz / 1.6
    f_hi = min(profile.frequency_max_hz * 1.6, e.rate_hz / 2)
    show = (c.frequencies_hz >= f_lo) & (c.frequencies_hz <= f_hi) & (c.frequencies_hz > 0)
    dense = np.geomspace(profile.frequency_min_hz, profile.frequency_max_hz, 800)
    target = profile.evaluate(dense)
    ax.fill_between(
        dense,
        target * 10 ** (criteria.tolerance_low_db / 10),
        target * 10 ** (criteria.tolerance_high_db / 10),
        color=BAND,
        alpha=0.85,
        lw=0,
        label=f"tolerance {criteria.tolerance_low_db:+g}/{criteria.tolerance_high_db:+g} dB",
    )
    lower, upper = e.confidence_limits(0.90)
    ax.fill_between(
        c.frequencies_hz[show], lower[show], upper[show], color=CONFIDENCE, alpha=0.7, lw=0,
        label=f"90 % confidence ({e.dof:.0f} dof)",
    )
    ax.loglog(dense, target, color=TARGET, lw=1.4, ls=(0, (6, 3)), label="target")
    ax.loglog(c.frequencies_hz[show], c.measured_g2_per_hz[show], color=MEASURED, lw=1.1, label="measured (Welch)")
    bad = c.judged & ~c.within
    if np.any(bad):
        ax.plot(c.frequencies_hz[bad], c.measured_g2_per_hz[bad], "|", color=OUTSIDE, ms=9, mew=1.3,
                label=f"outside tolerance ({int(np.count_nonzero(bad))} lines)")
    if np.any(c.edge):
        ax.plot(c.frequencies_hz[c.edge], c.measured_g2_per_hz[c.edge], ".", color=MUTED, ms=4,
                label="band edge: reported, not judged")
    positive = c.measured_g2_per_hz[show]
    positive = positive[positive > 0]
    floor = max(np.min(target) / 100, (np.min(positive) if positive.size else np.min(target)) / 2)
    ax.set_ylim(floor, np.max(target) * 10 ** (criteria.tolerance_high_db / 10) * 3)
    ax.set_xlim(f_lo, f_hi)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("ASD (g²/Hz)")
    heading = title or profile.name
    ax.set_title(
        f"{heading} | {_verdict(result)} | {result.grms_measured:.3g} g RMS measured, "
        f"{result.grms_target:.3g} target ({result.grms_error_percent:+.1f} %) | "
        f"resolution {e.resolution_hz:g} Hz",
        fontsize=9.5, color=INK, loc="left",
    )
    ax.legend(loc="lower center", fontsize=8, frameon=False, ncol=3)
    figure.tight_layout()
    return figure


def amplitude_figure(result: Verification, title: str = "") -> Figure:
    """Amplitude probability density of the record (log scale) against the Gaussian.

    References
    ----------
    Normal density phi(z) = exp(-z^2/2)/sqrt(2 pi).
    """
    figure = _figure()
    ax = figure.add_subplot(1, 1, 1)
    _style(ax)
    edges = result.histogram_edges_sigma
    density = result.histogram_density
    centres = 0.5 * (edges[1:] + edges[:-1])
    z = np.linspace(edges[0], edges[-1], 600)
    gauss = np.exp(-0.5 * z * z) / math.sqrt(2 * math.pi)
    ax.semilogy(z, gauss, color=TARGET, lw=1.3, ls=(0, (6, 3)), label="Gaussian")
    ax.bar(centres, density, width=edges[1] - edges[0], color=MEASURED, alpha=0.55, lw=0, label="record")
    stats = result.statistics
    ax.set_ylim(max(1e-7, 0.5 / max(stats["samples"], 1) / (edges[1] - edges[0])), 1.0)
    ax.set_xlim(edges[0], edges[-1])
    ax.set_xlabel("(x - mean) / standard deviation")
    ax.set_ylabel("probability density")
    ax.set_title(
        f"{title or result.profile.name} | kurtosis {stats['kurtosis']:.3f}, skewness {stats['skewness']:+.3f}, "
        f"crest factor {stats['crest_factor']:.2f}",
        fontsize=9.5, loc="left", color=INK,
    )
    ax.legend(frameon=False, fontsize=8)
    figure.tight_layout()
    return figure


def excerpt_figure(result: Verification, title: str = "") -> Figure:
    """The record around its largest sample, with +/-1, 2, 3 sigma lines (g against s)."""
    figure = _figure(9.0, 4.2)
    ax = figure.add_subplot(1, 1, 1)
    _style(ax)
    stats = result.statistics
    ax.plot(result.excerpt_t_s, result.excerpt_g, color=MEASURED, lw=0.7)
    for k in (1, 2, 3):
        for sign in (1, -1):
            ax.axhline(stats["mean"] + sign * k * stats["std"], color=MUTED if k < 3 else OUTSIDE,
                       lw=0.8, ls=(0, (4, 3)))
        ax.text(result.excerpt_t_s[-1] if result.excerpt_t_s.size else 0, stats["mean"] + k * stats["std"],
                f" {k}σ", va="center", fontsize=8, color=INK)
    ax.set_xlabel("time (s)")
    ax.set_ylabel("acceleration (g)")
    ax.set_title(
        f"{title or result.profile.name} | excerpt around the largest sample: {stats['largest_peak_sigma']:.2f} σ "
        f"(peak {stats['peak']:.3g} g)",
        fontsize=9.5, loc="left", color=INK,
    )
    figure.tight_layout()
    return figure


def rms_figure(result: Verification, title: str = "") -> Figure:
    """RMS of successive windows against the target g RMS and its tolerance (stationarity)."""
    figure = _figure(9.0, 4.2)
    ax = figure.add_subplot(1, 1, 1)
    _style(ax)
    target = result.grms_target
    tol = result.criteria.grms_tolerance_percent / 100.0
    values = np.asarray(result.window_rms_g)
    starts = (np.arange(values.size) + 0.5) * result.window_s
    ax.axhspan(target * (1 - tol), target * (1 + tol), color=BAND, alpha=0.85, lw=0,
               label=f"target ±{result.criteria.grms_tolerance_percent:g} %")
    ax.axhline(target, color=TARGET, lw=1.2, ls=(0, (6, 3)), label=f"target {target:.3g} g")
    if values.size:
        ax.plot(starts, values, "o-", color=MEASURED, ms=3.5, lw=1.0, label=f"RMS per {result.window_s:.3g} s window")
    ax.set_ylim(0, max(target * (1 + tol), values.max() if values.size else target) * 1.25)
    ax.set_xlabel("time (s)")
    ax.set_ylabel("RMS (g)")
    ax.set_title(f"{title or result.profile.name} | RMS over time", fontsize=9.5, loc="left", color=INK)
    ax.legend(frameon=False, fontsize=8, loc="lower right")
    figure.tight_layout()
    return figure


def summary_figure(result: Verification, title: str = "", lines: tuple = ()) -> Figure:
    """A text page: verdict, rules, the key figures, and the drive-file cautions."""
    figure = _figure(8.27, 11.0)
    ax = figure.add_axes([0.07, 0.04, 0.86, 0.92])
    ax.axis("off")
    d = result.to_dict()
    s = d["statistics"]
    verdict = "PASS" if result.passed else "FAIL"
    colour = MEASURED if result.passed else OUTSIDE
    ax.text(0, 1, f"{verdict}", fontsize=28, color=colour, weight="bold", va="top", transform=ax.transAxes)
    ax.text(0.25, 0.985, title or result.profile.name, fontsize=12, color=INK, va="top", transform=ax.transAxes)
    body = []
    for reason in result.reasons:
        body.append("✗ " + reason)
    body.append("")
    body.append("Rules applied")
    for key, rule in d["rule"].items():
        body.append(f"  {key}: {rule}")
    body += [
        "",
        "Spectrum",
        f"  g RMS {d['grms_measured']:.4g} g measured, {d['grms_target']:.4g} g target ({d['grms_error_percent']:+.2f} %)",
        f"  worst line {d['asd']['max_deviation_db']:+.2f} dB at {d['asd']['max_deviation_frequency_hz']:g} Hz; "
        f"{100 * d['asd']['fraction_within_tolerance']:.1f} % of {d['asd']['lines_judged']} judged lines in tolerance",
        f"  Welch: Hann, 50 % overlap, {d['asd']['segments']} segments, {d['asd']['dof']:.0f} dof, "
        f"resolution {d['asd']['resolution_hz']:g} Hz",
    ]
    if d["asd"]["dof_note"]:
        body.append("  note: " + d["asd"]["dof_note"])
    body += [
        "",
        "Amplitude",
        f"  mean {s['mean']:+.3g} g, RMS {s['rms']:.4g} g, skewness {s['skewness']:+.3f}, kurtosis {s['kurtosis']:.3f}",
        f"  peak {s['peak']:.4g} g, crest factor {s['crest_factor']:.3f}, largest |x - mean| {s['largest_peak_sigma']:.2f} σ",
    ]
    if s.get("davenport_expected_peak_sigma"):
        body.append(
            f"  Davenport expected largest |x| for {s['duration_s']:.4g} s: {s['davenport_expected_peak_sigma']:.2f} σ "
            f"(± {s['davenport_peak_std_sigma']:.2f})"
        )
    body.append(
        f"  zero up-crossings {s['zero_upcrossing_rate_hz']:.4g}/s; Rice {s['zero_upcrossing_rate_rice_hz']:.4g}/s, "
        f"sampled-process theory {s['zero_upcrossing_rate_sampled_theory_hz']:.4g}/s"
    )
    for row in s["exceedance"]:
        body.append(
            f"  beyond {row['k_sigma']:g} σ: {100 * row['measured_fraction']:.4f} % (Gaussian {100 * row['gaussian_fraction']:.4f} %)"
        )
    body += [""] + list(lines)
    body += [
        "",
        "Caution: a drive file is open-loop. Play it only through a closed-loop controller with",
        "alarm and abort limits; check the shaker's stroke, velocity and force limits; follow",
        "your lab's procedures, local codes and licensed practice.",
    ]
    ax.text(0, 0.93, "\n".join(body), fontsize=8.6, color=INK, va="top", family="monospace", transform=ax.transAxes)
    return figure


def write_report_figures(result: Verification, folder: str | os.PathLike, title: str = "", extra_lines: tuple = ()) -> dict:
    """Write the four figures as PNG and all pages (summary first) as one PDF, atomically.

    Each file is written under a temporary name in ``folder`` and renamed when
    complete, so an interrupted run leaves no half-written figure.

    Parameters
    ----------
    result : Verification
    folder : path
        Existing folder.
    title : str
        Heading for every page (e.g. the drive file's name).
    extra_lines : tuple of str
        More lines for the summary page.

    Returns
    -------
    dict
        Name -> written path: ``asd``, ``amplitude``, ``excerpt``, ``rms`` (PNG), ``pdf``.

    References
    ----------
    See the individual figure functions.
    """
    folder = Path(folder)
    builders = {
        "asd": asd_figure,
        "amplitude": amplitude_figure,
        "excerpt": excerpt_figure,
        "rms": rms_figure,
    }
    figures = {name: build(result, title) for name, build in builders.items()}
    written = {}
    temporaries = []
    try:
        for name, figure in figures.items():
            path = folder / f"{name}.png"
            temporary = folder / f".{name}.png.partial-{os.getpid()}"
            temporaries.append(temporary)
            figure.savefig(temporary, format="png", facecolor=PAPER)
            written[name] = (temporary, path)
        pdf_path = folder / "report.pdf"
        pdf_temporary = folder / f".report.pdf.partial-{os.getpid()}"
        temporaries.append(pdf_temporary)
        with PdfPages(pdf_temporary) as pdf:
            pdf.savefig(summary_figure(result, title, extra_lines), facecolor=PAPER)
            for figure in figures.values():
                pdf.savefig(figure, facecolor=PAPER)
        written["pdf"] = (pdf_temporary, pdf_path)
        for temporary, path in written.values():
            os.replace(temporary, path)
    finally:
        for temporary in temporaries:
            if temporary.exists():
                temporary.unlink()
    return {name: str(path) for name, (_, path) in written.items()}
