"""Figures of the durability results: FDS and ERS against natural frequency, log axes, target vs drive.

matplotlib's object API with the Agg canvas (never pyplot), in the palette of
the verification figures: warm paper, the specification in charcoal, the
drive in deep teal, the broadband estimate in sand.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["write_severity_figures", "write_equivalence_figure"]

PAPER = "#fbf8f1"
INK = "#2b2b2b"
TARGET = "#3a3a3a"
BROADBAND = "#c9a44c"
DRIVE = "#0b6e69"
EXTRA = "#b23a25"
MUTED = "#8a8174"
GRID = "#ddd5c4"


def _style(ax) -> None:
    """The verification figures' axes style, on a logarithmic natural-frequency axis."""
    from matplotlib.ticker import FuncFormatter

    from vibsynth.analysis.figures import style_axes

    style_axes(ax)
    ax.set_xscale("log")

    ax.xaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))


def _axes(title: str, subtitle: str, ylabel: str, ratio_panel: bool = False):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    figure = Figure(figsize=(9.0, 6.2 if ratio_panel else 5.2), dpi=110, facecolor=PAPER)
    FigureCanvasAgg(figure)
    height = figure.get_size_inches()[1]
    figure.subplots_adjust(left=0.1, right=0.97, bottom=(0.6 if ratio_panel else 1.05) / height,
                           top=1 - 0.72 / height, hspace=0.12)
    if ratio_panel:
        grid = figure.add_gridspec(2, 1, height_ratios=(2.6, 1.0))
        ax = figure.add_subplot(grid[0])
        lower = figure.add_subplot(grid[1], sharex=ax)
    else:
        ax = figure.add_subplot(1, 1, 1)
        lower = None
    for each in (ax, lower):
        if each is not None:
            _style(each)
    ax.set_yscale("log")
    ax.set_ylabel(ylabel, color=INK)
    bottom = lower if lower is not None else ax
    bottom.set_xlabel("natural frequency fn (Hz)", color=INK)
    if lower is not None:
        ax.tick_params(labelbottom=False)
    figure.text(0.1, 1 - 0.32 / height, title, fontsize=12, color=INK, weight="bold")
    figure.text(0.1, 1 - 0.52 / height, subtitle, fontsize=8.5, color=MUTED)
    return (figure, ax, lower) if ratio_panel else (figure, ax)


def _plain_y(ax) -> None:
    """Plain numbers (3, 40, 60) on a log axis that spans only a decade or two."""
    from matplotlib.ticker import FuncFormatter, LogLocator

    ax.yaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
    ax.yaxis.set_minor_locator(LogLocator(subs=(2.0, 3.0, 5.0)))
    ax.yaxis.set_minor_formatter(FuncFormatter(lambda value, _: f"{value:g}"))


def _legend(ax) -> None:
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=3, frameon=False, fontsize=8.5)


def write_severity_figures(folder, profile_result, drive_result=None, *, drive_fds_scaled=None,
                           ers_over_drive_duration_g=None, label: str = "profile", scatter=None) -> list:
    """Write ``fds.png`` and ``ers.png`` into a folder.

    Parameters
    ----------
    folder : str or os.PathLike
        Existing folder.
    profile_result : vibsynth.durability.damage.FdsResult
        The specification's FDS/ERS.
    drive_result : vibsynth.durability.damage.DriveSeverity, optional
        The drive's FDS/ERS.
    drive_fds_scaled : array_like, optional
        The drive's FDS scaled to the specification's duration (plotted instead of the raw one).
    ers_over_drive_duration_g : array_like, optional
        The specification's ERS over the drive's duration, g (a dashed line).
    label : str
        Name of the specification in the legends.
    scatter : vibsynth.scatter.SeverityScatter, optional
        Synthesized records: their 5-95 % band (filled), min-max band (lighter)
        and mean, on both figures, with the expected largest response in one
        record (Davenport) on the ERS.

    Returns
    -------
    list of pathlib.Path
        The files written.

    Examples
    --------
    >>> import tempfile
    >>> from vibsynth.profile.asd import AsdProfile
    >>> from vibsynth.durability.damage import profile_severity
    >>> result = profile_severity(AsdProfile([20.0, 2000.0], [0.01, 0.01]), 60.0, [50.0, 500.0])
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     [p.name for p in write_severity_figures(folder, result)]
    ['fds.png', 'ers.png']

    References
    ----------
    Lalanne, "Mechanical Vibration and Shock Analysis", vol. 5 (FDS and ERS plots).
    """
    folder = Path(folder)
    r = profile_result
    common = f"Q = {r.q:g}, b = {r.b:g}, duration {r.duration_s:g} s; damage per unit K^b/C (m^{r.b:g})"
    figure, ax, lower = _axes("Fatigue damage spectrum", common, f"damage (m^{r.b:g}, K = C = 1)", ratio_panel=True)
    ax.plot(r.fn_hz, r.fds_narrowband, color=TARGET, linewidth=1.8, label=f"{label}: narrow band")
    ax.plot(r.fn_hz, r.fds_dirlik, color=BROADBAND, linewidth=1.4, linestyle="--", label=f"{label}: Dirlik")
    lower.axhline(1.0, color=TARGET, linewidth=1.2)
    lower.plot(r.fn_hz, r.fds_dirlik / r.fds_narrowband, color=BROADBAND, linewidth=1.4, linestyle="--")
    if drive_result is not None:
        values = drive_result.fds if drive_fds_scaled is None else np.asarray(drive_fds_scaled)
        note = "" if drive_fds_scaled is None else f", scaled from {drive_result.duration_s:g} s"
        ax.plot(drive_result.fn_hz, values, color=DRIVE, linewidth=0, marker="o", markersize=3.5,
                label=f"drive: rainflow + Miner{note}")
        reference = np.interp(np.log(drive_result.fn_hz), np.log(r.fn_hz), r.fds_narrowband)
        lower.plot(drive_result.fn_hz, values / reference, color=DRIVE, linewidth=0.8, marker="o", markersize=3.5)
    if scatter is not None:
        _scatter_band(ax, scatter.fn_hz, scatter.fds_summary(), f"{scatter.records} records",
                      f", scaled from {scatter.record_duration_s:g} s" if scatter.record_duration_s != r.duration_s
                      else "")
        _scatter_band(lower, scatter.fn_hz, {key: value / r.fds_narrowband for key, value in
                                             scatter.fds_summary().items()}, None, "")
    lower.set_ylabel("over narrow band", color=INK)
    top = max(2.0, float(np.nanmax(lower.get_ylim())))
    lower.set_ylim(0.0, min(top, 4.0))
    ax.legend(loc="upper right", frameon=True, facecolor=PAPER, edgecolor=GRID, fontsize=8.5)
    written = [folder / "fds.png"]
    figure.savefig(written[-1], facecolor=PAPER)
    figure, ax = _axes("Extreme response spectrum", f"Q = {r.q:g}; pseudo-acceleration (2 pi fn)^2 z_max / g0",
                       "extreme response (g)")
    _plain_y(ax)
    ax.plot(r.fn_hz, r.ers_g, color=TARGET, linewidth=1.8, label=f"{label}: expected largest in {r.duration_s:g} s")
    if ers_over_drive_duration_g is not None and drive_result is not None:
        ax.plot(r.fn_hz, ers_over_drive_duration_g, color=TARGET, linewidth=1.0, linestyle=":",
                label=f"{label}: expected largest in {drive_result.duration_s:g} s")
    if drive_result is not None:
        ax.plot(drive_result.fn_hz, drive_result.ers_g, color=DRIVE, linewidth=0, marker="o", markersize=3.5,
                label="drive: actual largest")
    if scatter is not None:
        _scatter_band(ax, scatter.fn_hz, scatter.ers_summary(), f"{scatter.records} records", "", largest=True)
        ax.plot(scatter.fn_hz, scatter.expected_ers_g, color=EXTRA, linewidth=1.0, linestyle="--",
                label=f"expected largest |z| in {scatter.record_duration_s:g} s (Davenport)")
    _legend(ax)
    written.append(folder / "ers.png")
    figure.savefig(written[-1], facecolor=PAPER)
    return written


def _scatter_band(ax, fn_hz, summary: dict, label, note: str, largest: bool = False) -> None:
    """The records' min-max band (light), 5-95 % band and mean over natural frequency."""
    if label is None:
        ax.fill_between(fn_hz, summary["min"], summary["max"], color=DRIVE, alpha=0.10, linewidth=0)
        ax.fill_between(fn_hz, summary["p05"], summary["p95"], color=DRIVE, alpha=0.22, linewidth=0)
        ax.plot(fn_hz, summary["mean"], color=DRIVE, linewidth=1.0)
        return
    what = "actual largest" if largest else "rainflow + Miner"
    ax.fill_between(fn_hz, summary["min"], summary["max"], color=DRIVE, alpha=0.10, linewidth=0,
                    label=f"{label}: min-max")
    ax.fill_between(fn_hz, summary["p05"], summary["p95"], color=DRIVE, alpha=0.22, linewidth=0,
                    label=f"{label}: 5-95 %")
    ax.plot(fn_hz, summary["mean"], color=DRIVE, linewidth=1.0, label=f"{label}: mean, {what}{note}")


def write_equivalence_figure(path, result) -> Path:
    """Write one PNG with the equivalent test's ASD, FDS ratio and ERS ratio.

    Parameters
    ----------
    path : str or os.PathLike
        PNG to write.
    result : vibsynth.durability.equivalence.EquivalentTest

    Returns
    -------
    pathlib.Path

    Examples
    --------
    >>> import tempfile, os, warnings
    >>> from vibsynth.profile.asd import AsdProfile
    >>> from vibsynth.durability.equivalence import equivalent_test
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")
    ...     test = equivalent_test([(AsdProfile([20.0, 2000.0], [0.01, 0.01]), 600.0)], 60.0, grid_points=12)
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     write_equivalence_figure(os.path.join(folder, "eq.png"), test).name
    'eq.png'

    References
    ----------
    Lalanne, vol. 5.
    """
    figure, ax = _axes("Equivalent test", f"{result.test_duration_s:g} s, Q = {result.q:g}, b = {result.b:g}",
                       "ASD (g^2/Hz)")
    ax.set_xlabel("frequency (Hz)", color=INK)
    ax.plot(result.fn_hz, result.exact_asd_g2_per_hz, color=MUTED, linewidth=1.0, linestyle=":",
            label="equal damage at every fn (before the fit)")
    ax.plot(result.profile.frequencies_hz, result.profile.asd_g2_per_hz, color=DRIVE, linewidth=1.8, marker="o",
            markersize=4, label=f"test profile ({result.profile.grms:.3g} g RMS)")
    _legend(ax)
    path = Path(path)
    figure.savefig(path, facecolor=PAPER)
    return path
