"""Figures of a derived profile: the measured ASD with its fit, and the response kurtosis spectrum.

Matplotlib's object API only (no pyplot state); files written atomically.

References
----------
Welch (1967) for the measured ASD; Kihm, Rizzi, Ferguson & Halfpenny (2013)
for response kurtosis against natural frequency.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from vibsynth.errors import InputError
from vibsynth.io.atomic import AtomicFile, commit_all, json_text

__all__ = ["derive_asd_figure", "response_kurtosis_figure", "write_derive_report"]

INK, PAPER, MEASURED, FIT, DRIVE = "#222222", "#fffdf8", "#7a8fa6", "#b3411f", "#2f7d4f"


def _figure(width_in: float = 8.5, height_in: float = 4.8) -> Figure:
    figure = Figure(figsize=(width_in, height_in), dpi=110, facecolor=PAPER)
    FigureCanvasAgg(figure)
    return figure


def derive_asd_figure(result) -> Figure:
    """Measured ASD lines and the fitted breakpoint profile on log-log axes.

    Parameters
    ----------
    result : vibsynth.analysis.derive.DerivedRecord

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> callable(derive_asd_figure)
    True

    References
    ----------
    Welch (1967).
    """
    figure = _figure()
    axes = figure.add_axes((0.1, 0.14, 0.86, 0.74))
    fit = result.fit
    axes.loglog(result.frequencies_hz, result.asd_g2_per_hz, color=MEASURED, lw=0.7,
                label=f"measured (Welch, {result.welch['resolution_hz']:.3g} Hz lines, {result.welch['dof']:.0f} dof)")
    axes.loglog(fit.frequencies_hz, fit.asd_g2_per_hz, color=FIT, lw=2.0, marker="o", ms=5,
                label=f"{fit.method} fit, {fit.frequencies_hz.size} breakpoints "
                      f"(log error RMS {fit.log_error_rms_db:.2f} dB)")
    axes.set_xlabel("frequency (Hz)")
    axes.set_ylabel("ASD (g$^2$/Hz)")
    axes.grid(True, which="both", lw=0.4, alpha=0.6)
    axes.legend(loc="lower center", fontsize=8.5, frameon=False)
    figure.suptitle(f"{Path(result.source).name}: {result.grms_g:.3g} g RMS, kurtosis {result.kurtosis:.2f}, "
                    + ("stationary" if result.stationary else "NOT stationary"), fontsize=10.5)
    return figure


def response_kurtosis_figure(series, title: str = "Response kurtosis") -> Figure:
    """Input kurtosis and SDOF response kurtosis against natural frequency, one colour per record.

    Parameters
    ----------
    series : sequence of (str, ResponseKurtosis)
        Label and response kurtosis spectrum of each record (a recording, drives).
    title : str

    Returns
    -------
    matplotlib.figure.Figure
        Solid lines with markers: response kurtosis; dashed lines: each
        record's input kurtosis; dotted: 3 (Gaussian).

    Examples
    --------
    >>> callable(response_kurtosis_figure)
    True

    References
    ----------
    Kihm, Rizzi, Ferguson & Halfpenny (2013).
    """
    figure = _figure()
    axes = figure.add_axes((0.1, 0.14, 0.86, 0.74))
    colours = (FIT, DRIVE, MEASURED, "#8a5fb0", "#c79a1e")
    top = 3.0
    for index, (label, spectrum) in enumerate(series):
        colour = colours[index % len(colours)]
        axes.semilogx(spectrum.fn_hz, spectrum.kurtosis, color=colour, marker="o", ms=4, lw=1.6,
                      label=f"{label}: response (Q {spectrum.q:g})")
        axes.axhline(spectrum.input_kurtosis, color=colour, ls="--", lw=1.0,
                     label=f"{label}: input {spectrum.input_kurtosis:.2f}")
        top = max(top, float(np.nanmax(spectrum.kurtosis)), spectrum.input_kurtosis)
    axes.axhline(3.0, color=INK, ls=":", lw=0.9, label="Gaussian (3)")
    axes.set_ylim(2.0, top * 1.15 + 0.2)
    axes.set_xlabel("natural frequency fn (Hz)")
    axes.set_ylabel("kurtosis")
    axes.grid(True, which="both", lw=0.4, alpha=0.6)
    axes.legend(loc="upper right", fontsize=8, frameon=False, ncol=2)
    figure.suptitle(title, fontsize=10.5)
    return figure


def write_derive_report(result, folder: Path, data: dict, drive_response=None) -> dict:
    """Write derive.json, derive-asd.png and response-kurtosis.png into ``folder`` (created if missing).

    Parameters
    ----------
    result : vibsynth.analysis.derive.DerivedRecord
    folder : pathlib.Path
        Destination folder; its parent must exist.
    data : dict
        The JSON to write as derive.json.
    drive_response : ResponseKurtosis, optional
        A drive's response kurtosis on the same natural frequencies, plotted beside the recording's.

    Returns
    -------
    dict
        File kind -> path written.

    Examples
    --------
    >>> callable(write_derive_report)
    True

    References
    ----------
    See :func:`derive_asd_figure` and :func:`response_kurtosis_figure`.
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise InputError("exists and is not a folder; give another --report folder", str(folder))
    if not folder.parent.exists():
        raise InputError("folder's parent does not exist; create it first", str(folder))
    folder.mkdir(exist_ok=True)
    series = [("recording", result.response)] + ([("drive", drive_response)] if drive_response is not None else [])
    figures = {"asd": derive_asd_figure(result),
               "response_kurtosis": response_kurtosis_figure(series, f"{Path(result.source).name}: response kurtosis")}
    names = {"asd": "derive-asd.png", "response_kurtosis": "response-kurtosis.png"}
    pending, written = [], {}
    try:
        for key, figure in figures.items():
            pending.append(AtomicFile(folder / names[key]))
            figure.savefig(pending[-1].temporary, format="png", facecolor=PAPER)
            written[key] = pending[-1]
        files = {key: str(file.destination) for key, file in written.items()}
        files["json"] = str(folder / "derive.json")
        pending.append(AtomicFile(folder / "derive.json"))
        pending[-1].temporary.write_text(json_text({**data, "report_files": files}), encoding="utf-8")
        written["json"] = pending[-1]
        commit_all(written.values())
    finally:
        for file in pending:
            file.discard()
    return files
