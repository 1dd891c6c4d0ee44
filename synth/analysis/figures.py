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

from vibsynth.errors import InputError
from vibsynth.io.atomic import AtomicFile, commit_all
from vibsynth.analysis.verify import Verification, floor_percent

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


def _margins(figure: Figure, bottom_in: float, right_in: float = 0.3, left_in: float = 0.85,
             top_in: float = 0.62) -> None:
    """Fixed margins in inches (room for the headings above and the labels/legend below).

    Fixed margins instead of an automatic layout engine: the figures have fixed
    sizes and contents, and an engine costs several re-draws per file.
    """
    width, height = figure.get_size_inches()
    figure.subplots_adjust(left=left_in / width, right=1 - right_in / width,
                           bottom=bottom_in / height, top=1 - top_in / height)


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


def _headings(figure: Figure, ax, result: Verification, title: str, detail: str) -> None:
    """File/profile name on top, the figure's key numbers below it, the verdict in colour on the right."""
    height = figure.get_size_inches()[1]
    figure.suptitle(title or result.profile.name, x=0.012, y=1 - 0.08 / height, ha="left", va="top",
                    fontsize=10.5, color=INK)
    ax.set_title(detail, fontsize=9, color=INK, loc="left")
    ax.set_title(
        _verdict(result), fontsize=10.5, weight="bold", loc="right",
        color=MEASURED if result.passed else OUTSIDE,
    )


def _legend_below(figure: Figure, ax, ncol: int) -> None:
    """Legend outside the data area, under the axes, so it never hides a curve."""
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        figure.legend(handles, labels, loc="lower center", bbox_to_anchor=(0.5, 0.0), ncol=ncol, fontsize=8,
                      frameon=False)


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
    _margins(figure, bottom_in=1.1)
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
    positive = c.measured_g2_per_hz[show]
    positive = positive[positive > 0]
    floor = max(np.min(target) / 100, (np.min(positive) if positive.size else np.min(target)) / 2)
    ceiling = max(np.max(target) * 10 ** (criteria.tolerance_high_db / 10) * 3,
                  (np.max(positive) if positive.size else 0.0) * 2)
    ax.set_ylim(floor, ceiling)
    bad = c.judged & ~c.within
    if np.any(bad):
        # Lines far outside (a notch, say) may fall below the plotted range: pin their
        # markers to the axis edge so every failing line stays visible.
        values = np.clip(c.measured_g2_per_hz[bad], floor * 1.25, ceiling / 1.25)
        ax.plot(c.frequencies_hz[bad], values, "o", color=OUTSIDE, ms=2.6, mew=0, zorder=3,
                label=f"outside tolerance ({int(np.count_nonzero(bad))} lines; ticks on the axis)")
        ax.plot(c.frequencies_hz[bad], np.zeros(int(np.count_nonzero(bad))), "|", color=OUTSIDE, ms=7, mew=1.0,
                transform=ax.get_xaxis_transform(), clip_on=False)
    if np.any(c.edge):
        ax.plot(c.frequencies_hz[c.edge], np.clip(c.measured_g2_per_hz[c.edge], floor * 1.25, None), ".",
                color=MUTED, ms=5, label=f"within {criteria.edge_exclusion_resolutions:g} resolution widths of a "
                                          "band edge: judged against the window-smoothed target")
    if result.mixed is not None:  # tone lines and narrow bands of a mixed-mode record
        from vibsynth.analysis.tones import mark_parts_on_asd

        mark_parts_on_asd(ax, result)
    ax.set_xlim(f_lo, f_hi)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("ASD (g²/Hz)")
    _headings(
        figure, ax, result, title,
        f"{result.grms_measured:.3g} g RMS measured, {result.grms_target:.3g} g target "
        f"({result.grms_error_percent:+.1f} %); worst line {c.max_deviation_db:+.2f} dB at "
        f"{c.max_deviation_frequency_hz:g} Hz; resolution {e.resolution_hz:g} Hz",
    )
    _legend_below(figure, ax, ncol=3)
    return figure


def amplitude_figure(result: Verification, title: str = "") -> Figure:
    """Amplitude probability density of the record (log scale) against the Gaussian.

    References
    ----------
    Normal density phi(z) = exp(-z^2/2)/sqrt(2 pi).
    """
    figure = _figure()
    _margins(figure, bottom_in=0.6)
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
    ax.set_ylabel("probability density (1/σ)")
    _headings(
        figure, ax, result, title,
        f"amplitude density: kurtosis {stats['kurtosis']:.3f}, skewness {stats['skewness']:+.3f}, "
        f"crest factor {stats['crest_factor']:.2f}",
    )
    ax.legend(frameon=False, fontsize=8, loc="upper right")
    return figure


def excerpt_figure(result: Verification, title: str = "") -> Figure:
    """The record around its largest sample, with +/-1, 2, 3 sigma lines (g against s)."""
    figure = _figure(9.0, 4.2)
    _margins(figure, bottom_in=0.6, right_in=0.5)
    ax = figure.add_subplot(1, 1, 1)
    _style(ax)
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
    _headings(
        figure, ax, result, title,
        f"excerpt around the largest sample: {stats['largest_peak_sigma']:.2f} σ (peak {stats['peak']:.3g} g, "
        f"RMS {stats['rms']:.3g} g)",
    )
    return figure


def rms_figure(result: Verification, title: str = "") -> Figure:
    """RMS of successive windows against the target g RMS and its tolerance (stationarity)."""
    figure = _figure(9.0, 4.2)
    _margins(figure, bottom_in=0.9)
    ax = figure.add_subplot(1, 1, 1)
    _style(ax)
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
    _headings(
        figure, ax, result, title,
        f"RMS over time: {result.grms_measured:.3g} g overall ({result.grms_error_percent:+.1f} % of target)",
    )
    _legend_below(figure, ax, ncol=3)
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
        f"{floor_percent(d['asd']['fraction_within_tolerance'])} % of {d['asd']['lines_judged']} judged lines in tolerance",
        f"  Welch: Hann, 50 % overlap, {d['asd']['segments']} segments, {d['asd']['dof']:.0f} dof, "
        f"resolution {d['asd']['resolution_hz']:g} Hz",
        f"  {d['asd']['lines_near_edge_not_judged']} lines within {d['asd']['edge_exclusion_resolutions']:g} "
        "resolution widths of a band edge: judged against the target seen through the Hann window",
    ]
    if d["asd"]["outside_ranges_hz"]:
        body.append("  outside tolerance at " + ", ".join(
            f"{lo:g} Hz" if lo == hi else f"{lo:g}-{hi:g} Hz" for lo, hi in d["asd"]["outside_ranges_hz"][:6]
        ) + (" ..." if len(d["asd"]["outside_ranges_hz"]) > 6 else ""))
    if d["asd"]["dof_note"]:
        body.append("  note: " + d["asd"]["dof_note"])
    body += [
        "",
        "Amplitude",
        f"  mean {s['mean']:+.3g} g, RMS {s['rms']:.4g} g, skewness {s['skewness']:+.3f}, kurtosis {s['kurtosis']:.3f}",
        f"  peak {s['peak']:.4g} g, crest factor {s['crest_factor']:.3f}, largest |x - mean| {s['largest_peak_sigma']:.2f} σ",
    ]
    if s.get("expected_peak_sampled_sigma"):
        body.append(
            f"  expected largest |x| of a Gaussian record of {s['duration_s']:.4g} s at this rate: "
            f"{s['expected_peak_sampled_sigma']:.2f} σ (± {s['expected_peak_sampled_std_sigma']:.2f})"
        )
    if s.get("davenport_expected_peak_sigma"):
        body.append(
            f"  Davenport, continuous signal: {s['davenport_expected_peak_sigma']:.2f} σ "
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

    Raises
    ------
    InputError
        When ``folder`` is not an existing folder.

    References
    ----------
    See the individual figure functions.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"report folder {str(folder)!r} does not exist or is not a folder; create it first",
                         location="--report")
    builders = {
        "asd": asd_figure,
        "amplitude": amplitude_figure,
        "excerpt": excerpt_figure,
        "rms": rms_figure,
    }
    figures = {name: build(result, title) for name, build in builders.items()}
    written = {}
    pending = []
    try:
        for name, figure in figures.items():
            pending.append(AtomicFile(folder / f"{name}.png"))
            figure.savefig(pending[-1].temporary, format="png", facecolor=PAPER)
            written[name] = pending[-1]
        pending.append(AtomicFile(folder / "report.pdf"))
        with PdfPages(pending[-1].temporary) as pdf:
            pdf.savefig(summary_figure(result, title, extra_lines), facecolor=PAPER)
            for figure in figures.values():
                pdf.savefig(figure, facecolor=PAPER)
        written["pdf"] = pending[-1]
        commit_all(written.values())
    finally:
        for file in pending:
            file.discard()
    return {name: str(file.destination) for name, file in written.items()}
