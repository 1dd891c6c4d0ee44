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
GRID_MINOR = "#eee7d8"


def _axes(title: str, subtitle: str, ylabel: str):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    figure = Figure(figsize=(9.0, 5.2), dpi=110, facecolor=PAPER)
    FigureCanvasAgg(figure)
    figure.subplots_adjust(left=0.1, right=0.97, bottom=0.2, top=0.86)
    ax = figure.add_subplot(1, 1, 1)
    ax.set_facecolor(PAPER)
    ax.set_axisbelow(True)
    for spine in ("top", "right"):
        ax.spines[spine].set_visible(False)
    for spine in ("left", "bottom"):
        ax.spines[spine].set_color(MUTED)
    ax.tick_params(colors=INK, labelsize=8.5)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.grid(True, which="major", color=GRID, linewidth=0.7)
    ax.grid(True, which="minor", color=GRID_MINOR, linewidth=0.4)
    from matplotlib.ticker import FuncFormatter

    ax.xaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
    ax.set_xlabel("natural frequency fn (Hz)", color=INK)
    ax.set_ylabel(ylabel, color=INK)
    figure.text(0.1, 0.94, title, fontsize=12, color=INK, weight="bold")
    figure.text(0.1, 0.9, subtitle, fontsize=8.5, color=MUTED)
    return figure, ax


def _plain_y(ax) -> None:
    """Plain numbers (3, 40, 60) on a log axis that spans only a decade or two."""
    from matplotlib.ticker import FuncFormatter, LogLocator

    ax.yaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
    ax.yaxis.set_minor_locator(LogLocator(subs=(2.0, 3.0, 5.0)))
    ax.yaxis.set_minor_formatter(FuncFormatter(lambda value, _: f"{value:g}"))


def _legend(ax) -> None:
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=3, frameon=False, fontsize=8.5)


def write_severity_figures(folder, profile_result, drive_result=None, *, drive_fds_scaled=None,
                           ers_over_drive_duration_g=None, label: str = "profile") -> list:
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
    figure, ax = _axes("Fatigue damage spectrum", common, f"damage (m^{r.b:g}, K = C = 1)")
    ax.plot(r.fn_hz, r.fds_narrowband, color=TARGET, linewidth=1.8, label=f"{label}: narrow band")
    ax.plot(r.fn_hz, r.fds_dirlik, color=BROADBAND, linewidth=1.4, linestyle="--", label=f"{label}: Dirlik")
    if drive_result is not None:
        values = drive_result.fds if drive_fds_scaled is None else np.asarray(drive_fds_scaled)
        note = "" if drive_fds_scaled is None else f", scaled from {drive_result.duration_s:g} s"
        ax.plot(drive_result.fn_hz, values, color=DRIVE, linewidth=0, marker="o", markersize=3.5,
                label=f"drive: rainflow + Miner{note}")
    _legend(ax)
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
    _legend(ax)
    written.append(folder / "ers.png")
    figure.savefig(written[-1], facecolor=PAPER)
    return written


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
