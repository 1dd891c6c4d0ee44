"""Reading and writing ASD profiles: TOML profiles, two-column CSV tables, bundled presets.

TOML profile format (vibsynth's own)::

    name = "conveyor-transfer"
    description = "Invented demo: parcel conveyor transfer deck"
    unit = "g^2/Hz"                 # or "(m/s^2)^2/Hz"
    level_db = 0.0                  # optional: shift the whole table by dB ...
    # grms = 3.5                    # ... or scale it to an overall g RMS (not both)

    [[breakpoints]]
    frequency = 10.0
    asd = 0.002

    [[breakpoints]]
    frequency = 40.0
    slope_db_per_octave = 6.0      # this point's ASD follows from the previous one

Each breakpoint gives ``frequency`` (Hz) and exactly one of ``asd`` and
``slope_db_per_octave``.

An optional ``[amplitude]`` table carries amplitude statistics for the drive
(written by ``vibsynth derive``; read by :func:`read_amplitude_section`, never
part of the ASD)::

    [amplitude]
    model = "bursts"                # "gaussian", "transform" or "bursts"
    kurtosis = 5.2                  # Pearson (3: Gaussian)
    skewness = 0.01
    burst_s = 0.8                   # bursts only: envelope time scale, s

CSV: two columns, frequency in Hz and ASD, separated by commas, semicolons,
tabs or spaces; ``#`` starts a comment.  Without a header row the ASD is in
g^2/Hz.  A header row's ASD column (its second cell) must name its unit, one of
the spellings in :mod:`vibsynth.profile.units` (``g^2/Hz``, ``g2/Hz``,
``(m/s^2)^2/Hz``, ``m^2/s^4/Hz``, ...), e.g. ``frequency (Hz), ASD (m^2/s^4/Hz)``
or ``frequency_hz,asd_g2_per_hz``; a header that names no unit, or both,
is refused.  The TOML ``unit`` key accepts the same spellings.
"""

from __future__ import annotations

import csv
import dataclasses
import difflib
import io
import math
import os
import re
import tomllib
from importlib import resources
from pathlib import Path

from vibsynth.errors import InputError
from vibsynth.profile.asd import AsdProfile
from vibsynth.profile.units import ACCEPTED_SPELLINGS, G2_PER_HZ, asd_unit, asd_units_named_in

_TOP_KEYS = ("name", "description", "unit", "level_db", "grms", "notes", "breakpoints", "amplitude",
             "tones", "narrow_bands", "schedule", "schedule_ramp_s")  # the last four: vibsynth.profile.mixed
_POINT_KEYS = ("frequency", "asd", "slope_db_per_octave")

PRESET_PACKAGE = "vibsynth.presets"


def _suggest(key: str, allowed) -> str:
    close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.5)
    hint = f"did you mean '{close[0]}'? " if close else ""
    return f"{hint}allowed keys: {', '.join(allowed)}"


def _unit_factor(unit, source: str, location: str) -> float:
    if not isinstance(unit, str):
        raise InputError(f"unit must be text: {ACCEPTED_SPELLINGS}", source, location)
    found = asd_unit(unit)
    if found is None:
        raise InputError(f"unknown unit '{unit}'; use {ACCEPTED_SPELLINGS}", source, location)
    return found.to_g2_per_hz


def _number(value, source: str, location: str, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{what} must be a number, got {value!r}", source, location)
    number = float(value)
    if not math.isfinite(number):
        raise InputError(f"{what} must be a finite number, got {value!r}", source, location)
    return number


# --------------------------------------------------------------------- TOML
def parse_toml_profile(text: str, source: str = "<toml>") -> AsdProfile:
    """Parse a vibsynth TOML profile.

    Parameters
    ----------
    text : str
        The TOML document (format in the module docstring).
    source : str
        File name for error messages.

    Returns
    -------
    AsdProfile
        ASD in g^2/Hz, with the optional ``level_db`` or ``grms`` scaling applied.

    References
    ----------
    TOML v1.0.0 (toml.io); log-log breakpoint tables with dB/octave slopes.
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise InputError(f"not valid TOML ({error})", source) from None
    if "channels" in data:
        raise InputError(
            "a multi-channel profile ([[channels]]); read it with vibsynth.profile.multichannel.read_any_profile",
            source, "channels",
        )
    return profile_from_table(data, source)


def profile_from_table(data: dict, source: str = "<toml>", prefix: str = "", allowed=_TOP_KEYS) -> AsdProfile:
    """An :class:`AsdProfile` from a parsed TOML table (the keys of the module docstring).

    Parameters
    ----------
    data : dict
        The parsed table (``breakpoints``, ``unit``, ``level_db``, ``grms``, ...).
    source : str
        File name for error messages.
    prefix : str
        Location of the table inside the file (e.g. ``"channels[2]."``), for messages.
    allowed : sequence of str
        Keys the table may hold.

    Returns
    -------
    AsdProfile
        ASD in g^2/Hz.

    Examples
    --------
    >>> table = {"breakpoints": [{"frequency": 20, "asd": 0.01}, {"frequency": 2000, "asd": 0.01}]}
    >>> round(profile_from_table(table).grms, 3)  # sqrt(0.01 x 1980)
    4.45

    References
    ----------
    TOML v1.0.0 (toml.io); log-log breakpoint tables with dB/octave slopes.
    """
    for key in data:
        if key not in allowed:
            raise InputError(f"unknown key '{key}'; {_suggest(key, allowed)}", source, prefix + key)
    points = data.get("breakpoints")
    if points is None:
        raise InputError("no [[breakpoints]] table; add at least two breakpoints", source, prefix.rstrip(".") or None)
    if not isinstance(points, list) or not all(isinstance(p, dict) for p in points):
        raise InputError("'breakpoints' must be an array of tables ([[breakpoints]])", source, prefix + "breakpoints")
    if len(points) < 2:
        raise InputError(f"a profile needs at least two breakpoints, got {len(points)}", source, prefix + "breakpoints")
    factor = _unit_factor(data.get("unit", "g^2/Hz"), source, prefix + "unit")
    triples = []
    for index, point in enumerate(points):
        location = f"{prefix}breakpoints[{index + 1}]"
        for key in point:
            if key not in _POINT_KEYS:
                raise InputError(f"unknown key '{key}'; {_suggest(key, _POINT_KEYS)}", source, location)
        if "frequency" not in point:
            raise InputError("missing 'frequency' (Hz)", source, location)
        frequency = _number(point["frequency"], source, location + ".frequency", "frequency (Hz)")
        asd = slope = None
        if "asd" in point:
            asd = _number(point["asd"], source, location + ".asd", "asd (g^2/Hz)") * factor
        if "slope_db_per_octave" in point:
            slope = _number(point["slope_db_per_octave"], source, location + ".slope_db_per_octave", "slope (dB/octave)")
        triples.append((frequency, asd, slope))
    name = data.get("name", Path(source).stem if source else "profile")
    description = data.get("description", "")
    if not isinstance(name, str) or not isinstance(description, str):
        raise InputError("'name' and 'description' must be text", source)
    profile = AsdProfile.from_breakpoints(triples, name=name, description=description, source=source)
    if "level_db" in data and "grms" in data:
        raise InputError("give 'level_db' or 'grms', not both", source)
    if "level_db" in data:
        profile = profile.scaled_db(_number(data["level_db"], source, prefix + "level_db", "level_db (dB)"))
    if "grms" in data:
        profile = profile.scaled_to_grms(_number(data["grms"], source, prefix + "grms", "grms (g)"))
    from vibsynth.profile.mixed import parse_mixed

    mixed = parse_mixed(data, source)  # tones, narrow bands, level schedule (None when absent)
    if mixed is not None:
        profile = dataclasses.replace(profile, mixed=mixed)
    return profile


# ---------------------------------------------------------------------- CSV
_SPLIT = re.compile(r"[,;\t ]+")


def parse_csv_profile(text: str, source: str = "<csv>") -> AsdProfile:
    """Parse a two-column CSV table: frequency (Hz), ASD (g^2/Hz unless the header names another unit).

    Parameters
    ----------
    text : str
        The table; separators ``,`` ``;`` tab or spaces; ``#`` comments; an
        optional header row (first data line whose cells are not numbers).
        The header's ASD column must name its unit (g^2/Hz or
        (m/s^2)^2/Hz, in any spelling of :mod:`vibsynth.profile.units`);
        only that column is read for the unit.
    source : str
        File name for error messages.

    Returns
    -------
    AsdProfile
        ASD in g^2/Hz ((m/s^2)^2/Hz values divided by g0^2 = 9.80665^2).

    Raises
    ------
    InputError
        A malformed row, or a header whose ASD column names no unit or two.

    Examples
    --------
    >>> p = parse_csv_profile("frequency (Hz), ASD (m^2/s^4/Hz)\\n20,1\\n2000,1\\n")
    >>> round(p.grms, 4)  # sqrt(1980) / 9.80665
    4.5375

    References
    ----------
    RFC 4180 (CSV), relaxed to the separators test labs use; g0 = 9.80665 m/s^2
    (3rd CGPM 1901, ISO 80000-3).
    """
    factor = 1.0
    triples = []
    header_seen = False
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0].strip()
        if not line:
            continue
        cells = [c for c in _SPLIT.split(line) if c != ""]
        if not cells:  # separators only (e.g. ';;' from a spreadsheet's empty row): a blank line
            continue
        row = f"row {number}"
        if not triples and not header_seen and not _looks_numeric(cells[0]):
            header_seen = True
            factor = _header_unit(line, source, row).to_g2_per_hz
            continue
        if len(cells) != 2:
            raise InputError(
                f"expected 2 columns (frequency in Hz, ASD in g^2/Hz), found {len(cells)}: {line!r}", source, row
            )
        values = []
        for cell, what in zip(cells, ("frequency (Hz)", "ASD (g^2/Hz)")):
            try:
                value = float(cell)
            except ValueError:
                raise InputError(f"{what} {cell!r} is not a number", source, row) from None
            if not math.isfinite(value):
                raise InputError(f"{what} {cell!r} is not a finite number", source, row)
            values.append(value)
        frequency, asd = values
        if frequency <= 0:
            raise InputError(f"frequency {frequency:g} Hz must be > 0", source, row)
        if asd <= 0:
            raise InputError(
                f"ASD {asd:g} must be > 0 (log-log interpolation needs positive values)", source, row
            )
        if triples and frequency <= triples[-1][0]:
            what = "repeats" if frequency == triples[-1][0] else "is below"
            raise InputError(
                f"frequency {frequency:g} Hz {what} the previous row ({triples[-1][0]:g} Hz); "
                "frequencies must be strictly increasing",
                source,
                row,
            )
        triples.append((frequency, asd * factor, None))
    if not triples:
        raise InputError("no data rows; expected rows of 'frequency_hz, asd_g2_per_hz'", source)
    if len(triples) < 2:
        raise InputError(f"a profile needs at least two breakpoints, got {len(triples)}", source)
    return AsdProfile.from_breakpoints(triples, name=Path(source).stem, source=source)


def _header_cells(header: str) -> list[str]:
    """A header row's cells: split at ``,`` ``;`` and tabs outside brackets, empty cells dropped.

    A header without such separators is split at its first run of spaces (the
    frequency column is one word, e.g. ``frequency_hz asd_g2_per_hz``); the
    rest is the ASD column.
    """
    cells, depth, start = [], 0, 0
    for index, char in enumerate(header):
        if char in "([{":
            depth += 1
        elif char in ")]}":
            depth = max(depth - 1, 0)
        elif char in ",;\t" and depth == 0:
            cells.append(header[start:index])
            start = index + 1
    cells.append(header[start:])
    cells = [cell.strip() for cell in cells if cell.strip()]
    if len(cells) == 1:
        cells = cells[0].split(None, 1)
    return cells


def _header_unit(header: str, source: str, location: str):
    """The ASD unit named by a CSV header's ASD column (its second cell); refuses a column naming neither or both."""
    cells = _header_cells(header)
    if len(cells) > 2:
        raise InputError(
            f"header {header!r} has {len(cells)} columns; a profile table has 2 (frequency in Hz, ASD with its unit)",
            source,
            location,
        )
    column = cells[1] if len(cells) == 2 else ""
    found = asd_units_named_in(column)
    if len(found) == 1:
        return found[0][0]
    if not found:
        start = min((i for i in (column.find("("), column.find("[")) if i >= 0), default=0)
        found_text = f"found {column[start:].strip()!r}" if column else "no ASD column"
        raise InputError(
            f"header {header!r}: the ASD column names no accepted unit ({found_text}); "
            f"name {ACCEPTED_SPELLINGS}, or drop the header row (a table without one is read as {G2_PER_HZ.name})",
            source,
            location,
        )
    tokens = " and ".join(f"{unit.name} ({token!r})" for unit, token in found)
    raise InputError(
        f"header {header!r}: the ASD column names two units, {tokens}; name one, {ACCEPTED_SPELLINGS}",
        source,
        location,
    )


def _looks_numeric(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


# ------------------------------------------------------------------ presets
def preset_names() -> list[str]:
    """Names of the bundled presets (TOML files shipped in the package), sorted."""
    folder = resources.files(PRESET_PACKAGE)
    return sorted(p.name[: -len(".toml")] for p in folder.iterdir() if p.name.endswith(".toml"))


def read_preset(name: str) -> AsdProfile:
    """Load a bundled preset by name (see :func:`preset_names`)."""
    names = preset_names()
    if name not in names:
        close = difflib.get_close_matches(name, names, n=1, cutoff=0.5)
        hint = f"did you mean '{close[0]}'? " if close else ""
        raise InputError(f"no such file or preset; {hint}presets: {', '.join(names)}", name)
    text = resources.files(PRESET_PACKAGE).joinpath(name + ".toml").read_text(encoding="utf-8")
    return parse_toml_profile(text, source=f"preset {name}")


# --------------------------------------------------------------- dispatcher
def read_profile(spec: str | os.PathLike) -> AsdProfile:
    """Read a profile from a TOML file, a CSV file or a bundled preset name.

    Parameters
    ----------
    spec : str or path
        A path ending in ``.toml`` or ``.csv`` (``.txt`` and ``.dat`` are read
        as CSV), or the name of a bundled preset.

    Returns
    -------
    AsdProfile
        ASD in g^2/Hz.

    Raises
    ------
    InputError
        Missing/empty/unreadable file, unknown suffix, or any content problem;
        the message names the file and the row or key.

    References
    ----------
    See :func:`parse_toml_profile` and :func:`parse_csv_profile`.
    """
    text_spec = os.fspath(spec)
    path = Path(text_spec)
    if not path.exists():
        if path.suffix == "" and os.sep not in text_spec:
            return read_preset(text_spec)
        raise InputError("no such file; give a .toml or .csv profile or a preset name (see 'vibsynth presets')", text_spec)
    if path.is_dir():
        if path.suffix == "" and os.sep not in text_spec and text_spec in preset_names():
            return read_preset(text_spec)  # a folder named like a preset (e.g. a run folder) does not hide it
        raise InputError("is a folder; give a .toml or .csv profile file", text_spec)
    suffix = path.suffix.lower()
    if suffix not in (".toml", ".csv", ".txt", ".dat"):
        raise InputError(f"unknown profile suffix '{path.suffix}'; use .toml or .csv", text_spec)
    try:
        raw = path.read_bytes()
    except OSError as error:
        raise InputError(f"cannot read ({error.strerror})", text_spec) from None
    if not raw.strip():
        raise InputError("file is empty; expected a profile with at least two breakpoints", text_spec)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        raise InputError(f"not UTF-8 text (byte {error.start}); save the profile as UTF-8", text_spec) from None
    if suffix == ".toml":
        return parse_toml_profile(text, source=text_spec)
    return parse_csv_profile(text, source=text_spec)


# ------------------------------------------------------------------ writing
def format_toml_profile(profile: AsdProfile) -> str:
    """The profile as vibsynth TOML (ASD values at every breakpoint, g^2/Hz; mixed-mode sections after them)."""
    schedule = getattr(getattr(profile, "mixed", None), "schedule", None)
    lines = [
        f"name = {_toml_string(profile.name)}",
        f"description = {_toml_string(profile.description)}",
        'unit = "g^2/Hz"',
        *([f"schedule_ramp_s = {float(schedule.ramp_s)!r}"] if schedule is not None else []),
        f"# overall {profile.grms:.6g} g RMS, band {profile.frequency_min_hz:g}-{profile.frequency_max_hz:g} Hz",
    ]
    slopes = profile.slopes_db_per_octave
    for index, (frequency, asd) in enumerate(zip(profile.frequencies_hz, profile.asd_g2_per_hz)):
        lines.append("")
        lines.append("[[breakpoints]]")
        lines.append(f"frequency = {float(frequency)!r}")
        comment = "" if index == 0 else f"  # {slopes[index - 1]:+.3f} dB/octave from the previous point"
        lines.append(f"asd = {float(asd)!r}{comment}")
    from vibsynth.profile.mixed import format_mixed_toml

    return "\n".join(lines) + "\n" + format_mixed_toml(getattr(profile, "mixed", None))


def format_csv_profile(profile: AsdProfile) -> str:
    """The profile as a two-column CSV with a header (Hz, g^2/Hz)."""
    buffer = io.StringIO()
    heading = f"{profile.name}: {profile.description}" if profile.description else profile.name
    buffer.write("# " + " ".join(heading.split()) + "\n")
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(["frequency_hz", "asd_g2_per_hz"])
    for frequency, asd in zip(profile.frequencies_hz, profile.asd_g2_per_hz):
        writer.writerow([repr(float(frequency)), repr(float(asd))])
    return buffer.getvalue()


def write_profile(profile: AsdProfile, path: str | os.PathLike) -> Path:
    """Write a profile as TOML or CSV (by suffix), atomically (temporary name, then rename).

    Parameters
    ----------
    profile : AsdProfile
    path : str or path
        Destination ending in ``.toml`` or ``.csv``.

    Returns
    -------
    pathlib.Path
        The written path.
    """
    destination = Path(path)
    suffix = destination.suffix.lower()
    if suffix == ".toml":
        text = format_toml_profile(profile)
    elif suffix == ".csv":
        text = format_csv_profile(profile)
    else:
        raise InputError(f"cannot write a profile as '{destination.suffix}'; use .toml or .csv", str(destination))
    if not destination.parent.exists():
        raise InputError("folder does not exist; create it first", str(destination.parent))
    from vibsynth.io.atomic import write_text_atomic

    return write_text_atomic(destination, text)


def _toml_string(text: str) -> str:
    escaped = text.replace("\\", "\\\\").replace('"', '\\"').replace("\n", " ")
    return f'"{escaped}"'


# ------------------------------------------------------------- amplitude table
#: Models an ``[amplitude]`` table may name.
AMPLITUDE_MODELS = ("gaussian", "transform", "bursts")
_AMPLITUDE_KEYS = ("model", "kurtosis", "skewness", "burst_s", "crest_factor", "source")


def parse_amplitude_section(text: str, source: str = "<toml>") -> dict | None:
    """The ``[amplitude]`` table of a TOML profile, checked; None when there is none.

    Parameters
    ----------
    text : str
        The TOML document.
    source : str
        File name for error messages.

    Returns
    -------
    dict or None
        ``model`` (``gaussian``, ``transform`` or ``bursts``), ``kurtosis``
        (Pearson, dimensionless), ``skewness`` (dimensionless), ``burst_s``
        (s, bursts only; may be absent), and the informative ``crest_factor``
        and ``source`` when present.

    Examples
    --------
    >>> parse_amplitude_section('[amplitude]\\nmodel = "bursts"\\nkurtosis = 5.0\\nburst_s = 0.8\\n')["burst_s"]
    0.8

    References
    ----------
    TOML v1.0.0 (toml.io).
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise InputError(f"not valid TOML ({error})", source) from None
    table = data.get("amplitude")
    if table is None:
        return None
    if not isinstance(table, dict):
        raise InputError("'amplitude' must be a table ([amplitude])", source, "amplitude")
    for key in table:
        if key not in _AMPLITUDE_KEYS:
            raise InputError(f"unknown key '{key}'; {_suggest(key, _AMPLITUDE_KEYS)}", source, "amplitude")
    model = table.get("model", "transform")
    if model not in AMPLITUDE_MODELS:
        raise InputError(f"model {model!r} must be one of {', '.join(AMPLITUDE_MODELS)}", source, "amplitude.model")
    result = {"model": model}
    for key, what in (("kurtosis", "kurtosis (Pearson, 3 is Gaussian)"), ("skewness", "skewness"),
                      ("burst_s", "burst_s (s)"), ("crest_factor", "crest_factor")):
        if key in table:
            result[key] = _number(table[key], source, f"amplitude.{key}", what)
    if "source" in table:
        if not isinstance(table["source"], str):
            raise InputError("'source' must be text", source, "amplitude.source")
        result["source"] = table["source"]
    if model == "bursts":
        if not result.get("kurtosis", 0.0) > 3.0:
            raise InputError("the bursts model needs kurtosis above 3", source, "amplitude.kurtosis")
        if "burst_s" in result and not result["burst_s"] > 0:
            raise InputError(f"burst_s {result['burst_s']:g} must be > 0 s", source, "amplitude.burst_s")
    if model == "transform" and "kurtosis" not in result and "skewness" not in result:
        raise InputError("the transform model needs kurtosis or skewness", source, "amplitude")
    return result


def read_amplitude_section(spec: str | os.PathLike) -> dict | None:
    """The ``[amplitude]`` table of a TOML profile file (None for CSV files, presets and TOML without one).

    Parameters
    ----------
    spec : str or path
        As for :func:`read_profile`.

    Returns
    -------
    dict or None
        See :func:`parse_amplitude_section`.

    Examples
    --------
    >>> read_amplitude_section("no-such-preset-name") is None
    True

    References
    ----------
    TOML v1.0.0 (toml.io).
    """
    path = Path(os.fspath(spec))
    if path.suffix.lower() != ".toml" or not path.is_file():
        return None
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except (OSError, UnicodeDecodeError):
        return None  # read_profile has already said what is wrong with the file
    return parse_amplitude_section(text, source=os.fspath(spec))


def format_amplitude_section(amplitude: dict) -> str:
    """An ``[amplitude]`` table as TOML text (keys of :func:`parse_amplitude_section`).

    Examples
    --------
    >>> print(format_amplitude_section({"model": "bursts", "kurtosis": 5.0, "burst_s": 0.8}), end="")
    [amplitude]
    model = "bursts"
    kurtosis = 5.0
    burst_s = 0.8

    References
    ----------
    TOML v1.0.0 (toml.io).
    """
    lines = ["[amplitude]"]
    for key in _AMPLITUDE_KEYS:
        if amplitude.get(key) is None:
            continue
        value = amplitude[key]
        lines.append(f"{key} = {_toml_string(value) if isinstance(value, str) else repr(float(value))}")
    return "\n".join(lines) + "\n"
