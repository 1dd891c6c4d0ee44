"""Batches of drive jobs on a Dask cluster: a plan file, one drive per job and seed, a summary.

A *plan* (TOML) lists jobs; each job is a profile (file or preset), a
duration, a rate, a format, the drive options of :class:`~vibsynth.jobs.DriveRequest`
(level, kurtosis, clip, ...), the verification limits, and a list of seeds
(or a count from a base seed).  Every job x seed is one *task*: the drive
``NAME-seedS.FORMAT`` and its sidecar, made by the same functions as
``vibsynth generate`` (:func:`vibsynth.jobs.prepare_drive`,
:func:`vibsynth.jobs.write_prepared_drive`) and so byte-identical to it,
then verified (:func:`vibsynth.jobs.verify_drive`) into
``NAME-seedS.verify.json``.  ``summary.json`` (``results``: one object per
task) and ``summary.csv`` come last.

Plan layout::

    [defaults]              # optional: any job key, for every job
    rate_hz = 5120
    format = "flac"

    [[jobs]]
    name = "conveyor-full"  # optional; default job01, job02, ...
    profile = "parcel-conveyor"   # preset name, or a file relative to the plan
    duration_s = 60
    seeds = [1, 2, 3]       # or: seed_count = 3, base_seed = 1 (seeds 1, 2, 3)
    level_db = -6           # or grms = 2.5
    kurtosis = 5            # skewness, clip, amplitude, ramp_s, loop, ...

The whole plan is checked before anything runs (:func:`prepare_batch`):
every profile read, every drive planned; a bad job is refused with one
:class:`~vibsynth.errors.InputError` naming the plan file and the job.

Resuming: a task is done when its drive, sidecar and verify JSON exist and
the verify JSON records the job's hash (SHA-256 of the job definition,
profile breakpoints included).  A drive and sidecar without a verify JSON
are verified, not remade, when the sidecar records this job's seed, options,
profile and plan; a drive whose sidecar records something else is refused
(never overwritten).  A drive file without its sidecar was cut off while
being written and is made again.  Every file is written atomically, so a
killed batch loses only the tasks in flight.

The same engine makes the Monte-Carlo records of ``vibsynth peaks`` and
``vibsynth severity --records`` (:class:`dask_mapper`, passed as ``mapper`` to
:func:`vibsynth.peaks.peak_report` and :func:`vibsynth.scatter.severity_scatter`).

Workers: tasks run on a :mod:`dask.distributed` client (a local cluster of
one single-threaded worker process per core by default, or an existing
scheduler).  With a remote scheduler the output folder (and nothing else:
the profiles travel with the tasks) must be reachable at the same path
from every worker.  Dask is an optional dependency (``vibsynth[cluster]``).

References
----------
Dask Development Team, "Dask: Library for dynamic task scheduling" (2016),
https://dask.org; TOML v1.0.0; FIPS 180-4 (SHA-256); RFC 4180 (CSV);
RFC 8259 (JSON).
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import datetime
import difflib
import functools
import hashlib
import io
import json
import math
import os
import re
import time
import tomllib
import types
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from vibsynth.errors import InputError, VibsynthWarning

#: What to install when Dask is missing.
INSTALL_HINT = "pip install 'vibsynth[cluster]'"

#: Version of the summary.json layout.
SUMMARY_SCHEMA_VERSION = 1

#: Columns of summary.csv (and the keys of every object in summary.json's ``results``), in order.
SUMMARY_COLUMNS = ("job", "seed", "file", "sha256", "pass", "grms_error_percent", "worst_db", "kurtosis",
                   "crest_factor", "wall_time_s", "status", "sidecar", "verify_file", "error")

#: Drive formats a job may ask for.
FORMATS = ("flac", "wav", "csv", "npy")

#: Job keys with their kind: required, drive options, verification limits.
_REQUIRED = ("profile", "duration_s", "rate_hz")
_DRIVE_KEYS = {
    "amplitude": "text", "resolution_hz": "positive", "loop": "bool", "quantities": "text-list",
    "subtype": "text", "full_scale_g": "positive", "ramp_s": "non-negative", "stroke_limit_mm": "positive",
    "velocity_limit_m_s": "positive", "memory_budget_mb": "positive", "kurtosis": "number",
    "skewness": "number", "clip": "number",
}
_VERIFY_KEYS = {"tolerance_db": "tolerance", "grms_tolerance_percent": "positive", "min_fraction_within": "positive",
                "verify_resolution_hz": "positive", "dof": "positive", "figures": "bool"}
_OTHER_KEYS = {"name": "text", "profile": "text", "duration_s": "positive", "rate_hz": "positive", "format": "text",
               "seeds": "seed-list", "seed_count": "count", "base_seed": "seed", "level_db": "number",
               "grms": "positive"}
JOB_KEYS = tuple(sorted({**_OTHER_KEYS, **_DRIVE_KEYS, **_VERIFY_KEYS}))
_KINDS = {**_OTHER_KEYS, **_DRIVE_KEYS, **_VERIFY_KEYS}

_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")


def require_dask():
    """Import :mod:`dask.distributed`, or refuse in one line saying what to install.

    Returns
    -------
    module
        :mod:`distributed`.

    Raises
    ------
    InputError
        Dask is not installed.

    Examples
    --------
    >>> require_dask().__name__
    'distributed'

    References
    ----------
    Dask Development Team (2016), https://distributed.dask.org.
    """
    try:
        import distributed
    except ImportError:
        raise InputError(f"batches run on Dask, which is not installed; install it with {INSTALL_HINT}") from None
    return distributed


# ====================================================================== the plan
@dataclass(frozen=True)
class BatchJob:
    """One job of a plan: a drive definition and its seeds.

    Parameters
    ----------
    name : str
        File-name stem of the job's outputs (``NAME-seedS.FORMAT``).
    index : int
        Position in the plan, from 1.
    profile : str
        The profile as the plan names it (recorded in the sidecar as ``vibsynth generate`` would).
    profile_path : str
        Where it is read from (a file resolved against the plan's folder, or the preset name).
    duration_s, rate_hz : float
        Duration (s) and sample rate (Hz).
    file_format : str
        ``flac``, ``wav``, ``csv`` or ``npy``.
    seeds : tuple of int
    grms, level_db : float or None
        Rescale the profile to this g RMS (g), or shift it by this many dB, first.
    drive : dict
        Further :class:`~vibsynth.jobs.DriveRequest` fields (``kurtosis``, ``clip``, ``ramp_s``, ...).
    verify : dict
        ``tolerance_db`` (low, high dB), ``grms_tolerance_percent`` (%),
        ``min_fraction_within``, ``resolution_hz`` (Hz or None), ``dof`` (or None),
        ``figures`` (also write the figures and report.pdf into ``NAME-seedS.report/``).
    """

    name: str
    index: int
    profile: str
    profile_path: str
    duration_s: float
    rate_hz: float
    file_format: str
    seeds: tuple
    grms: float | None = None
    level_db: float | None = None
    drive: dict = field(default_factory=dict)
    verify: dict = field(default_factory=dict)

    def stem(self, seed: int) -> str:
        """File-name stem of one seed's outputs: ``NAME-seedS``.

        Examples
        --------
        >>> BatchJob("lab", 1, "bench-flat", "bench-flat", 4.0, 5120.0, "npy", (3,)).stem(3)
        'lab-seed3'
        """
        return f"{self.name}-seed{int(seed)}"

    def definition(self) -> dict:
        """Everything that decides this job's outputs, as plain data (the profile as named; seconds, Hz).

        Examples
        --------
        >>> BatchJob("lab", 1, "bench-flat", "bench-flat", 4.0, 5120.0, "npy", (3,)).definition()["rate_hz"]
        5120.0
        """
        return {
            "name": self.name, "profile": self.profile, "duration_s": self.duration_s, "rate_hz": self.rate_hz,
            "format": self.file_format, "grms": self.grms, "level_db": self.level_db,
            "drive": {key: (list(value) if isinstance(value, tuple) else value) for key, value in
                      sorted(self.drive.items())},
            "verify": {key: (list(value) if isinstance(value, tuple) else value) for key, value in
                       sorted(self.verify.items())},
        }


@dataclass(frozen=True)
class BatchPlan:
    """A checked plan: its source and its jobs (see :func:`parse_plan`)."""

    source: str
    jobs: tuple

    @property
    def task_count(self) -> int:
        """Number of drives the plan makes (jobs x seeds)."""
        return sum(len(job.seeds) for job in self.jobs)


def _suggest(key: str, allowed) -> str:
    close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
    return f"did you mean '{close[0]}'? " if close else ""


def _value(kind: str, value, where: str, source: str, key: str):
    """A plan value of the given kind, or an InputError naming the job and key."""

    def bad(what: str):
        return InputError(f"`{key}` is {value!r}; {what}", source, where)

    is_number = isinstance(value, (int, float)) and not isinstance(value, bool)
    if kind in ("number", "positive", "non-negative"):
        if not is_number or not math.isfinite(value):
            raise bad("give a finite number")
        if kind == "positive" and value <= 0:
            raise bad("give a number > 0")
        if kind == "non-negative" and value < 0:
            raise bad("give a number >= 0")
        return float(value)
    if kind == "text":
        if not isinstance(value, str) or not value.strip():
            raise bad("give a text value in quotes")
        return value
    if kind == "bool":
        if not isinstance(value, bool):
            raise bad("give true or false")
        return value
    if kind == "text-list":
        if not isinstance(value, list) or not value or not all(isinstance(v, str) for v in value):
            raise bad('give a list of names, e.g. ["acceleration", "velocity"]')
        return tuple(value)
    if kind in ("seed", "count"):
        if not isinstance(value, int) or isinstance(value, bool) or value < (1 if kind == "count" else 0):
            raise bad("give a whole number >= 1" if kind == "count" else "give a whole number >= 0")
        return value
    if kind == "seed-list":
        if (not isinstance(value, list) or not value
                or not all(isinstance(v, int) and not isinstance(v, bool) and v >= 0 for v in value)):
            raise bad("give a list of whole numbers >= 0, e.g. [1, 2, 3]")
        if len(set(value)) != len(value):
            raise bad("give each seed once")
        return tuple(value)
    if kind == "tolerance":
        if is_number and math.isfinite(value) and value > 0:
            return (-float(value), float(value))
        if (isinstance(value, list) and len(value) == 2
                and all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in value)
                and value[0] < 0 < value[1]):
            return (float(value[0]), float(value[1]))
        raise bad("give a number of dB > 0 (3 for +-3 dB) or [low, high] with low < 0 < high")
    raise AssertionError(kind)  # pragma: no cover


def parse_plan(text: str, source: str = "<plan>", base_dir=None) -> BatchPlan:
    """Read a plan from TOML text and check every job's keys (profiles are read later).

    Parameters
    ----------
    text : str
        The plan (TOML): optional ``[defaults]``, one or more ``[[jobs]]``.
    source : str
        Name of the plan in messages.
    base_dir : str or os.PathLike, optional
        Folder that relative profile paths are read from (default: the current folder).

    Returns
    -------
    BatchPlan

    Raises
    ------
    InputError
        Not TOML, no jobs, an unknown or mistyped key, a missing key, two
        jobs with one name, both ``seeds`` and ``seed_count``, both ``grms``
        and ``level_db``; the message names the job (``job 'NAME' (jobs[2])``).

    Examples
    --------
    >>> plan = parse_plan('[[jobs]]\\nprofile = "bench-flat"\\nduration_s = 4\\nrate_hz = 5120\\n'
    ...                   'format = "npy"\\nseeds = [1, 2]\\n')
    >>> [plan.jobs[0].stem(seed) for seed in plan.jobs[0].seeds]
    ['job1-seed1', 'job1-seed2']

    References
    ----------
    TOML v1.0.0 (https://toml.io).
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise InputError(f"not a TOML plan ({error})", source) from None
    unknown = sorted(set(data) - {"jobs", "defaults", "title", "description"})
    if unknown:
        raise InputError(f"unknown key `{unknown[0]}`; a plan has [defaults], [[jobs]], title and description",
                         source)
    defaults = data.get("defaults", {})
    if not isinstance(defaults, dict):
        raise InputError("[defaults] must be a table of job keys", source, "defaults")
    for key in defaults:
        if key not in _KINDS or key in ("name", "seeds"):
            raise InputError(f"unknown key `{key}`; {_suggest(key, JOB_KEYS)}defaults take the job keys but name "
                             "and seeds", source, "defaults")
    entries = data.get("jobs")
    if not isinstance(entries, list) or not entries or not all(isinstance(e, dict) for e in entries):
        raise InputError("no jobs; add one or more [[jobs]] tables (profile, duration_s, rate_hz, format, seeds)",
                         source)
    base = Path(base_dir) if base_dir is not None else Path(".")
    width = len(str(len(entries)))
    jobs, names = [], {}
    for index, entry in enumerate(entries, start=1):
        raw_name = entry.get("name", f"job{index:0{width}d}")
        where = f"job '{raw_name}' (jobs[{index}])" if "name" in entry else f"jobs[{index}]"
        merged = {**defaults, **entry}
        for key in merged:
            if key not in _KINDS:
                raise InputError(f"unknown key `{key}`; {_suggest(key, JOB_KEYS)}job keys: {', '.join(JOB_KEYS)}",
                                 source, where)
        values = {key: _value(_KINDS[key], value, where, source, key) for key, value in merged.items()}
        name = values.get("name", raw_name)
        if not _NAME.match(name):
            raise InputError(f"`name` {name!r} must be letters, digits, '.', '_' or '-' (it names files)",
                             source, where)
        if name in names:
            raise InputError(f"`name` {name!r} is also the name of jobs[{names[name]}]; give each job its own name",
                             source, where)
        names[name] = index
        for key in _REQUIRED:
            if key not in values:
                raise InputError(f"`{key}` is missing; every job needs {', '.join(_REQUIRED)} and seeds",
                                 source, where)
        if "seeds" in values and ("seed_count" in values or "base_seed" in values):
            raise InputError("give `seeds` (a list) or `seed_count` with `base_seed`, not both", source, where)
        if "seeds" in values:
            seeds = values["seeds"]
        elif "seed_count" in values:
            first = values.get("base_seed", 1)
            seeds = tuple(range(first, first + values["seed_count"]))
        else:
            raise InputError("`seeds` is missing; give seeds = [1, 2, ...] or seed_count = N (from base_seed)",
                             source, where)
        if values.get("grms") is not None and values.get("level_db") is not None:
            raise InputError("give `grms` or `level_db`, not both", source, where)
        file_format = values.get("format", "flac").lower().lstrip(".")
        if file_format not in FORMATS:
            raise InputError(f"`format` is {values.get('format')!r}; give one of {', '.join(FORMATS)}", source, where)
        profile = values["profile"]
        candidate = Path(profile) if Path(profile).is_absolute() else base / profile
        looks_like_file = Path(profile).suffix != "" or os.sep in profile or "/" in profile
        profile_path = str(candidate) if (looks_like_file or candidate.exists()) else profile
        verify = {
            "tolerance_db": values.get("tolerance_db", (-3.0, 3.0)),
            "grms_tolerance_percent": values.get("grms_tolerance_percent", 10.0),
            "min_fraction_within": values.get("min_fraction_within", 1.0),
            "resolution_hz": values.get("verify_resolution_hz"),
            "dof": values.get("dof"),
            "figures": values.get("figures", False),
        }
        if not verify["grms_tolerance_percent"] < 100:
            raise InputError("`grms_tolerance_percent` must lie between 0 and 100", source, where)
        if not verify["min_fraction_within"] <= 1:
            raise InputError("`min_fraction_within` must lie in (0, 1]", source, where)
        if verify["dof"] is not None and verify["dof"] < 2:
            raise InputError("`dof` must be at least 2", source, where)
        jobs.append(BatchJob(
            name=name, index=index, profile=profile, profile_path=profile_path,
            duration_s=values["duration_s"], rate_hz=values["rate_hz"], file_format=file_format, seeds=seeds,
            grms=values.get("grms"), level_db=values.get("level_db"),
            drive={key: values[key] for key in _DRIVE_KEYS if key in values}, verify=verify,
        ))
    return BatchPlan(source=source, jobs=tuple(jobs))


def read_plan(path) -> BatchPlan:
    """Read a plan file (TOML); relative profile paths are read from the plan's folder.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "plan.toml"
    >>> _ = path.write_text('[[jobs]]\\nprofile = "bench-flat"\\nduration_s = 4\\nrate_hz = 5120\\nseed_count = 3\\n')
    >>> read_plan(path).task_count
    3

    References
    ----------
    TOML v1.0.0.
    """
    path = Path(path)
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except FileNotFoundError:
        raise InputError("no such plan file; give a TOML plan with [[jobs]] tables", str(path)) from None
    except IsADirectoryError:
        raise InputError("is a folder; give a TOML plan file", str(path)) from None
    except UnicodeDecodeError as error:
        raise InputError(f"not UTF-8 text (byte {error.start}); save the plan as UTF-8", str(path)) from None
    return parse_plan(text, str(path), path.parent)


# ====================================================================== checking and planning
@dataclass(frozen=True)
class BatchTask:
    """One drive to make (or verify) on a worker: plain data, picklable.

    ``make`` is False when the drive and its sidecar exist already (from this
    job) and only the verification is missing.
    """

    job: str
    seed: int
    folder: str
    drive_name: str
    profile: object
    request: object
    verify: dict
    job_hash: str
    make: bool = True

    @property
    def verify_name(self) -> str:
        """Name of the per-drive verification file."""
        return self.drive_name.rsplit(".", 1)[0] + ".verify.json"

    @property
    def report_name(self) -> str | None:
        """Name of the per-drive report folder (figures, report.pdf), or None when the job asks for none."""
        return self.drive_name.rsplit(".", 1)[0] + ".report" if self.verify.get("figures") else None


@dataclass(frozen=True)
class PreparedBatch:
    """A checked plan against its output folder: the tasks to run and the rows already done.

    Attributes
    ----------
    plan : BatchPlan
    folder : pathlib.Path
    tasks : tuple of BatchTask
        In plan order.
    done : dict
        ``(job, seed)`` -> summary row, for the drives finished by an earlier run.
    warnings : tuple of str
        Warnings of the planning, each prefixed with its job.
    """

    plan: BatchPlan
    folder: Path
    tasks: tuple
    done: dict
    warnings: tuple


def _plain(value):
    """A value as JSON would give it back (tuples -> lists, numpy scalars -> numbers)."""
    from vibsynth.io.atomic import json_text

    return json.loads(json_text(value))


#: Sidecar keys that must agree for an existing drive to count as this job's.
_MATCH_KEYS = ("seed", "options", "profile", "plan", "transform")


def _sidecar_mismatch(expected: dict, path: Path, rate_hz: float, samples: int, subtype: str) -> str | None:
    """None when the sidecar at ``path`` records this job; else the first key that differs."""
    try:
        found = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return "an unreadable sidecar"
    if not isinstance(found, dict):
        return "an unreadable sidecar"
    for key in _MATCH_KEYS:
        if found.get(key) != expected.get(key):
            return f"another `{key}` in its sidecar"
    if found.get("rate") != rate_hz or found.get("samples") != samples or found.get("subtype") != subtype:
        return "another rate, length or sample format in its sidecar"
    return None


def _done_row(task: BatchTask, folder: Path) -> dict | None:
    """The summary row recorded by a finished task, or None when it is not finished."""
    from vibsynth.io import drivefile

    record_path = folder / task.verify_name
    try:
        record = json.loads(record_path.read_text(encoding="utf-8"))
        batch = record["batch"]
        if batch["job_hash"] != task.job_hash or batch["seed"] != task.seed:
            return None
        if batch["sidecar_sha256"] != drivefile.file_sha256(drivefile.sidecar_path(folder / task.drive_name)):
            return None
        if (folder / task.drive_name).stat().st_size != batch["drive_bytes"]:
            return None
        if task.report_name is not None and not (folder / task.report_name / "report.pdf").exists():
            return None
        row = dict(batch["row"])
    except (OSError, ValueError, KeyError, TypeError):
        return None
    row["status"] = "done earlier"
    return row


def prepare_batch(plan: BatchPlan, folder) -> PreparedBatch:
    """Check every job of a plan against the output folder; nothing is generated.

    Reads each profile, applies its rescale, plans each drive exactly as
    ``vibsynth generate`` would (:func:`vibsynth.jobs.prepare_drive`), checks
    the free space for all drives together, and sorts the tasks into done,
    to verify, and to make.  Creates ``folder`` (removed again when the plan
    is refused and the folder was new).

    Parameters
    ----------
    plan : BatchPlan
    folder : str or os.PathLike
        Output folder.

    Returns
    -------
    PreparedBatch

    Raises
    ------
    InputError
        A job that cannot be made (unknown preset, impossible rate, a
        kurtosis out of reach, ...), or a drive in the folder made by another
        job definition; the message names the plan and the job.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> plan = parse_plan('[[jobs]]\\nprofile = "bench-flat"\\nduration_s = 4\\nrate_hz = 5120\\n'
    ...                   'format = "npy"\\nseeds = [7]\\n')
    >>> [task.drive_name for task in prepare_batch(plan, pathlib.Path(tempfile.mkdtemp()) / "out").tasks]
    ['job1-seed7.npy']

    References
    ----------
    See :func:`vibsynth.jobs.prepare_drive`.
    """
    from vibsynth import jobs as drive_jobs
    from vibsynth.io import drivefile
    from vibsynth.io.sidecar import profile_block
    from vibsynth.profile.files import read_profile

    folder = Path(folder).absolute()
    if folder.exists() and not folder.is_dir():
        raise InputError("exists and is not a folder; give another output folder", str(folder))
    created = not folder.exists()
    folder.mkdir(parents=True, exist_ok=True)
    try:
        tasks, done, collected, needed = [], {}, [], 0
        for job in plan.jobs:
            where = f"job '{job.name}' (jobs[{job.index}])"
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", VibsynthWarning)
                try:
                    profile = read_profile(job.profile_path)
                    if job.grms is not None:
                        profile = profile.scaled_to_grms(job.grms)
                    if job.level_db is not None:
                        profile = profile.scaled_db(job.level_db)
                    first = folder / f"{job.stem(job.seeds[0])}.{job.file_format}"
                    request = drive_jobs.DriveRequest(
                        output=str(first), duration_s=job.duration_s, rate_hz=job.rate_hz, seed=job.seeds[0],
                        profile_source=job.profile, scaling={"grms": job.grms, "level_db": job.level_db},
                        workers=1, **job.drive)
                    prepared = drive_jobs.prepare_drive(profile, request)
                except InputError as error:
                    raise InputError(error.one_line(), plan.source, where) from None
            for message in [*prepared.warnings, *(str(w.message) for w in caught
                                                   if issubclass(w.category, VibsynthWarning))]:
                text = f"job '{job.name}': {message}"
                if text not in collected:
                    collected.append(text)
            definition = {**job.definition(), "target": _plain(profile_block(profile, job.profile))}
            job_hash = hashlib.sha256(json.dumps(definition, sort_keys=True).encode()).hexdigest()
            expected = _plain(prepared.sidecar.to_dict())
            plan_ = prepared.plan
            per_file, _ = drivefile.estimate_file_bytes(prepared.file_format, prepared.subtype,
                                                        plan_.total_samples, plan_.quantities, plan_.rate_hz)
            for seed in job.seeds:
                drive_path = folder / f"{job.stem(seed)}.{job.file_format}"
                task = BatchTask(job=job.name, seed=seed, folder=str(folder), drive_name=drive_path.name,
                                 profile=profile,
                                 request=dataclasses.replace(request, output=str(drive_path), seed=seed),
                                 verify=dict(job.verify), job_hash=job_hash)
                side = drivefile.sidecar_path(drive_path)
                if drive_path.exists() and side.exists():
                    mismatch = _sidecar_mismatch({**expected, "seed": seed}, side, plan_.rate_hz,
                                                 plan_.total_samples, prepared.subtype)
                    if mismatch is not None:
                        raise InputError(f"{drive_path.name} exists with {mismatch} (made by another job "
                                         "definition); it is never overwritten: remove it, or give the job another "
                                         "name or another output folder", plan.source, where)
                    row = _done_row(task, folder)
                    if row is not None:
                        done[(job.name, seed)] = row
                        continue
                    task = dataclasses.replace(task, make=False)
                needed += per_file if task.make else 0
                tasks.append(task)
        if needed:
            drivefile.check_free_space(folder / "(all drives of the plan)", int(needed), exact=False)
    except BaseException:
        if created and not any(folder.iterdir()):
            folder.rmdir()
        raise
    return PreparedBatch(plan=plan, folder=folder, tasks=tuple(tasks), done=done, warnings=tuple(collected))


# ====================================================================== one task, on a worker
def run_task(task: BatchTask) -> dict:
    """Make (unless it exists) and verify one drive; write its verify JSON; return its summary row.

    Runs on a Dask worker (or anywhere): the drive and sidecar are written by
    :func:`vibsynth.jobs.write_prepared_drive`, atomically, exactly as
    ``vibsynth generate`` writes them; the verification
    (:func:`vibsynth.jobs.verify_drive`, against the job's rescaled target)
    goes to ``NAME-seedS.verify.json`` with a ``batch`` block (job hash,
    digests, the row).  An existing drive with its sidecar is not rewritten.

    Parameters
    ----------
    task : BatchTask

    Returns
    -------
    dict
        The summary row (:data:`SUMMARY_COLUMNS`) plus ``warnings`` (list of str).
        A task that fails returns a row with ``status`` ``error`` and the
        message in ``error`` (no files left behind but those finished).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> plan = parse_plan('[[jobs]]\\nprofile = "bench-flat"\\nduration_s = 4\\nrate_hz = 5120\\n'
    ...                   'format = "npy"\\nseeds = [7]\\ntolerance_db = 6\\n')
    >>> batch = prepare_batch(plan, pathlib.Path(tempfile.mkdtemp()))
    >>> run_task(batch.tasks[0])["file"]
    'job1-seed7.npy'

    References
    ----------
    See :func:`vibsynth.jobs.write_prepared_drive` and :func:`vibsynth.jobs.verify_drive`.
    """
    started = time.perf_counter()
    folder = Path(task.folder)
    drive_path = folder / task.drive_name
    row = {key: None for key in SUMMARY_COLUMNS}
    row.update(job=task.job, seed=task.seed, file=task.drive_name)
    row["pass"] = False
    messages: list = []
    try:
        from vibsynth import jobs as drive_jobs
        from vibsynth.io import drivefile
        from vibsynth.io.atomic import write_json_atomic

        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            side = drivefile.sidecar_path(drive_path)
            made = False
            if task.make and not (drive_path.exists() and side.exists()):
                prepared = drive_jobs.prepare_drive(task.profile, task.request)
                drive_jobs.write_prepared_drive(prepared)
                made = True
            drive = drivefile.open_drive(drive_path)
            verify = task.verify
            criteria = drive_jobs.drive_criteria(drive, tuple(verify["tolerance_db"]),
                                                 verify["grms_tolerance_percent"], verify["min_fraction_within"])
            result = drive_jobs.verify_drive(drive, task.profile, criteria, verify["resolution_hz"], verify["dof"])
            data = drive_jobs.verification_data(result, drive, task.drive_name)
        for item in caught:
            if issubclass(item.category, VibsynthWarning) and str(item.message) not in messages:
                messages.append(str(item.message))
        if result.segment_message and result.segment_message not in messages:
            messages.append(result.segment_message)
        summary = data
        row.update(
            sha256=drivefile.file_sha256(drive_path),
            sidecar=side.name,
            verify_file=task.verify_name,
            status="made" if made else "verified",
            error=None,
            **{"pass": bool(result.passed)},
            grms_error_percent=summary.get("grms_error_percent"),
            worst_db=(summary.get("asd") or {}).get("max_deviation_db"),
            kurtosis=(summary.get("statistics") or {}).get("kurtosis"),
            crest_factor=(summary.get("statistics") or {}).get("crest_factor"),
        )
        row["wall_time_s"] = round(time.perf_counter() - started, 3)
        data["batch"] = {
            "job": task.job,
            "seed": task.seed,
            "job_hash": task.job_hash,
            "drive_sha256": row["sha256"],
            "drive_bytes": drive_path.stat().st_size,
            "sidecar_sha256": drivefile.file_sha256(side),
            "row": {key: row[key] for key in SUMMARY_COLUMNS if key != "status"},
            "warnings": messages,
        }
        if task.report_name is not None:  # figures and report.pdf (their own verify.json without the batch block)
            report = {key: value for key, value in data.items() if key != "batch"}
            drive_jobs.write_verify_report(result, drive, folder / task.report_name, task.drive_name, report)
        write_json_atomic(folder / task.verify_name, data)  # last: it marks the task finished
    except Exception as error:  # reported in the row: one bad task does not stop the batch
        text = error.one_line() if isinstance(error, InputError) else f"{type(error).__name__}: {error}"
        row.update(status="error", error=" ".join(text.split()), **{"pass": False})
        row["wall_time_s"] = round(time.perf_counter() - started, 3)
    row["warnings"] = messages
    return row


# ====================================================================== running on Dask
#: Dask configuration while a local cluster starts (the scheduler, the nannies and the worker
#: processes read it then).  Measured on a 2-core machine with 60 s, 51.2 kHz .flac drive jobs
#: (generate + verify), 24 alternating runs of each setting:
#:
#: - Dask sets, before it spawns a worker process, OMP_NUM_THREADS = MKL_NUM_THREADS =
#:   OPENBLAS_NUM_THREADS = 1 (kept: one job per worker, single-threaded) and
#:   MALLOC_TRIM_THRESHOLD_ = 65536 (removed here, see also :func:`_without_dasks_malloc_setting`).
#:   Setting any glibc malloc threshold turns off its dynamic mmap threshold, so every array above
#:   128 KiB was mapped afresh and its pages faulted in and zeroed each time: 221 000 page faults
#:   and 0.71 CPU-seconds per job against 15 000 and 0.32 without it.  A worker's allocator then
#:   behaves as in a `vibsynth generate` process (the samples do not depend on it).
#: - Diagnostics for the dashboard, which a batch does not show: the statistical profiler that
#:   samples each worker's task thread every 10 ms (off), the event-loop watchdog every 20 ms, the
#:   memory monitor every 100 ms and the system monitor every 500 ms (500 ms, 500 ms, 2 s).  An
#:   idle cluster of two workers used 0.4 CPU-seconds in 5 s with Dask's defaults, 0.08 with these:
#:   on a 2-core machine the difference is taken from the jobs.
#:
#: Together: eight jobs in 2.55 s on one worker and 1.48 s on two, against 5.56 s and 3.17 s.
LOCAL_WORKER_CONFIG = {
    "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None,
    "distributed.worker.profile.enabled": False,
    "distributed.admin.tick.interval": "500ms",
    "distributed.worker.memory.monitor-interval": "500ms",
    "distributed.admin.system-monitor.interval": "2s",
}


def default_worker_count() -> int:
    """Worker processes of the default local cluster: the CPUs this process may run on.

    Examples
    --------
    >>> default_worker_count() >= 1
    True

    References
    ----------
    Python ``os.sched_getaffinity`` (where available) or ``os.cpu_count``.
    """
    from vibsynth.generate._threads import available_threads

    return available_threads(limit=None)


@contextlib.contextmanager
def _without_dasks_malloc_setting():
    """Hide Dask's MALLOC_TRIM_THRESHOLD_ from the workers spawned meanwhile, when an earlier cluster left it.

    A Dask nanny copies its pre-spawn settings into the environment of the process that runs
    it (here, this one), so after any cluster started with Dask's defaults every later worker
    process would inherit the malloc setting that :data:`LOCAL_WORKER_CONFIG` leaves out.  Only
    Dask's own value is hidden (a different one was set on purpose), and it is put back after.
    """
    import dask

    name = "MALLOC_TRIM_THRESHOLD_"
    inherited = os.environ.get(name)
    dasks = dask.config.get(f"distributed.nanny.pre-spawn-environ.{name}", None)  # before LOCAL_WORKER_CONFIG
    if inherited is None or dasks is None or inherited != str(dasks):
        yield
        return
    del os.environ[name]
    try:
        yield
    finally:
        os.environ[name] = inherited


@contextlib.contextmanager
def dask_client(scheduler: str | None = None, workers: int | None = None):
    """A :class:`distributed.Client`: on an existing scheduler, or on a new local cluster (closed after).

    Parameters
    ----------
    scheduler : str, optional
        Address of a running scheduler (``tcp://HOST:PORT``).
    workers : int, optional
        Worker processes of the local cluster (default :func:`default_worker_count`),
        one thread each, started with :data:`LOCAL_WORKER_CONFIG`.

    Yields
    ------
    distributed.Client

    Raises
    ------
    InputError
        Dask missing, or a scheduler that cannot be reached.

    Examples
    --------
    >>> with dask_client(workers=1) as client:
    ...     client.submit(abs, -2).result()
    2

    References
    ----------
    Dask Development Team (2016), https://distributed.dask.org (LocalCluster, Client).
    """
    import logging

    distributed = require_dask()
    if scheduler:
        try:
            client = distributed.Client(scheduler, timeout="10s", set_as_default=False)
        except (OSError, TimeoutError, ValueError) as error:
            raise InputError(f"cannot reach a Dask scheduler there ({' '.join(str(error).split())}); start one, "
                             "or leave out the address for a local cluster", str(scheduler)) from None
        with client:
            yield client
        return
    count = default_worker_count() if workers is None else int(workers)
    if count < 1:
        raise InputError(f"{count} workers; give at least 1", "workers")
    import dask

    # read when the scheduler, nannies and workers start, inside LocalCluster()
    with _without_dasks_malloc_setting(), dask.config.set(LOCAL_WORKER_CONFIG):
        cluster = distributed.LocalCluster(n_workers=count, threads_per_worker=1, processes=True,
                                           dashboard_address=":0", silence_logs=logging.ERROR)
    with cluster:
        with distributed.Client(cluster, set_as_default=False) as client:
            yield client


class dask_mapper:  # noqa: N801 - used like a function
    """A ``mapper(function, items)`` that runs on a Dask client and yields the results in order.

    For :func:`vibsynth.peaks.peak_report` (``mapper=``): the Monte-Carlo
    records are made on the workers, each from its own spawn key, so the
    numbers equal those made in one process.

    Parameters
    ----------
    client : distributed.Client
    block_records : int, optional
        Records per task (default 1).

    Examples
    --------
    >>> with dask_client(workers=1) as client:
    ...     list(dask_mapper(client)(abs, [-1, -2]))
    [1, 2]

    References
    ----------
    Dask Development Team (2016), https://distributed.dask.org (``Client.map``).
    """

    def __init__(self, client, block_records: int = 1):
        self.client = client
        self.block_records = max(1, int(block_records))

    def __call__(self, function, items):
        futures = self.client.map(_call_realigned, [function] * len(items := list(items)), items, pure=False)
        try:
            for future in futures:
                yield future.result()
        finally:
            self.client.cancel(futures)


def _realigned(value, seen=None):
    """``value`` with every numpy array reachable from it aligned (misaligned ones copied), in place where needed.

    Dask ships large numpy arrays as separate buffers that can land at any byte offset of a
    worker's message frame, so an array may arrive misaligned (measured: a plan's line spectrum
    at byte offset 10), and numpy then sums it by another, buffered path whose rounding differs
    in the last bits: a record made on a worker would differ from the same record made in this
    process.  An aligned copy is summed as here, so the figures are the same wherever they are
    computed, bit for bit.  Walks partials, tuples, lists, dicts and objects' attributes (the
    worker's own copy of the task is changed; frozen dataclasses included).
    """
    import numpy as np

    seen = set() if seen is None else seen
    if isinstance(value, np.ndarray):
        return value if value.flags.aligned or value.dtype.hasobject else value.copy()
    if id(value) in seen or isinstance(value, (str, bytes, int, float, complex, bool, type(None), type,
                                               types.ModuleType)):
        return value
    seen.add(id(value))
    if isinstance(value, functools.partial):
        return functools.partial(_realigned(value.func, seen), *(_realigned(a, seen) for a in value.args),
                                 **{k: _realigned(v, seen) for k, v in value.keywords.items()})
    if type(value) in (tuple, list):
        return type(value)(_realigned(item, seen) for item in value)
    if type(value) is dict:
        return {key: _realigned(item, seen) for key, item in value.items()}
    attributes = getattr(value, "__dict__", None)
    if isinstance(attributes, dict) and not callable(value):
        for key, item in list(attributes.items()):
            new = _realigned(item, seen)
            if new is not item:
                object.__setattr__(value, key, new)
    return value


def _call_realigned(function, *args):
    """``function(*args)`` after :func:`_realigned` of both (on a worker)."""
    return _realigned(function)(*_realigned(args))


def worker_count(client) -> int:
    """Workers a client's scheduler has now (at least 1).

    Examples
    --------
    >>> with dask_client(workers=1) as client:
    ...     worker_count(client)
    1

    References
    ----------
    Dask Development Team (2016), ``Client.scheduler_info``.
    """
    return max(1, len(client.scheduler_info().get("workers", {})))


@dataclass(frozen=True)
class BatchResult:
    """What a batch did: every row (plan order), the summary files, the warnings.

    Attributes
    ----------
    folder : pathlib.Path
    rows : tuple of dict
        One per drive of the plan (:data:`SUMMARY_COLUMNS`).
    summary : dict
        summary.json as written.
    paths : dict
        ``json`` and ``csv``: where the summaries went.
    warnings : tuple of str
    """

    folder: Path
    rows: tuple
    summary: dict
    paths: dict
    warnings: tuple

    @property
    def passed(self) -> bool:
        """True when every drive passed its verification."""
        return all(row["pass"] for row in self.rows)

    @property
    def made(self) -> int:
        """Drives written by this run."""
        return sum(1 for row in self.rows if row["status"] == "made")


def run_batch(batch: PreparedBatch, client, progress: Callable[[dict, int, int], None] | None = None,
              ) -> BatchResult:
    """Run a prepared batch's tasks on a Dask client; then write summary.json and summary.csv.

    Parameters
    ----------
    batch : PreparedBatch
    client : distributed.Client
    progress : callable, optional
        Called as ``progress(row, finished, total)`` after each task (on this process).

    Returns
    -------
    BatchResult
        Rows in plan order; tasks done by an earlier run keep their recorded row.

    Examples
    --------
    >>> run_batch.__name__
    'run_batch'

    References
    ----------
    Dask Development Team (2016), https://distributed.dask.org (``Client.submit``, ``as_completed``).
    """
    from distributed import as_completed

    started = time.perf_counter()
    report = progress if progress is not None else (lambda row, finished, total: None)
    rows = dict(batch.done)
    futures = {}
    for task in batch.tasks:
        key = f"vibsynth-{task.job}-{task.seed}-{task.job_hash[:12]}"
        futures[client.submit(_call_realigned, run_task, task, key=key, pure=False)] = task
    collected = list(batch.warnings)
    total = len(futures)
    for finished, future in enumerate(as_completed(list(futures), loop=client.loop), start=1):
        task = futures[future]
        try:
            row = future.result()
        except Exception as error:  # a worker lost (killed, out of memory)
            row = {key: None for key in SUMMARY_COLUMNS}
            row.update(job=task.job, seed=task.seed, file=task.drive_name, status="error",
                       error=" ".join(f"{type(error).__name__}: {error}".split()), warnings=[])
            row["pass"] = False
        for message in row.pop("warnings", []):
            text = f"job '{task.job}': {message}"
            if text not in collected:
                collected.append(text)
                warnings.warn(text, VibsynthWarning, stacklevel=2)
        rows[(task.job, task.seed)] = row
        report(row, finished, total)
    ordered = tuple(rows[(job.name, seed)] for job in batch.plan.jobs for seed in job.seeds)
    summary, paths = write_summary(batch, ordered, time.perf_counter() - started)
    return BatchResult(folder=batch.folder, rows=ordered, summary=summary, paths=paths, warnings=tuple(collected))


def write_summary(batch: PreparedBatch, rows, wall_time_s: float) -> tuple[dict, dict]:
    """Write summary.json (``results``: the rows) and summary.csv into the batch folder, atomically.

    Returns
    -------
    (dict, dict)
        summary.json's content, and the paths by key (``json``, ``csv``).

    Examples
    --------
    >>> write_summary.__name__
    'write_summary'

    References
    ----------
    RFC 8259 (JSON); RFC 4180 (CSV); ISO 8601 (time).
    """
    from vibsynth import __version__
    from vibsynth.io.atomic import write_json_atomic, write_text_atomic
    from vibsynth.io.caution import DRIVE_CAUTION

    rows = [{key: row.get(key) for key in SUMMARY_COLUMNS} for row in rows]
    counts = {
        "drives": len(rows),
        "made": sum(1 for r in rows if r["status"] == "made"),
        "verified_only": sum(1 for r in rows if r["status"] == "verified"),
        "done_earlier": sum(1 for r in rows if r["status"] == "done earlier"),
        "passed": sum(1 for r in rows if r["pass"]),
        "failed": sum(1 for r in rows if not r["pass"] and r["status"] != "error"),
        "errors": sum(1 for r in rows if r["status"] == "error"),
    }
    summary = {
        "schema_version": SUMMARY_SCHEMA_VERSION,
        "tool": {"name": "vibsynth", "version": __version__},
        "created_utc": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
        "plan": str(batch.plan.source),
        "wall_time_s": round(wall_time_s, 3),
        "counts": counts,
        "results": rows,
        "caution": DRIVE_CAUTION,
    }
    folder = batch.folder
    write_json_atomic(folder / "summary.json", summary)
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(SUMMARY_COLUMNS)
    for row in rows:
        writer.writerow(["" if row[key] is None else ("true" if row[key] is True else "false" if row[key] is False
                                                      else row[key]) for key in SUMMARY_COLUMNS])
    write_text_atomic(folder / "summary.csv", buffer.getvalue())
    return summary, {"json": str(folder / "summary.json"), "csv": str(folder / "summary.csv")}


__all__ = [
    "BatchJob", "BatchPlan", "BatchResult", "BatchTask", "PreparedBatch", "INSTALL_HINT", "LOCAL_WORKER_CONFIG",
    "SUMMARY_COLUMNS",
    "dask_client", "dask_mapper", "default_worker_count", "worker_count", "parse_plan", "prepare_batch", "read_plan", "require_dask",
    "run_batch", "run_task", "write_summary",
]
