"""Shared pieces of the command line: messages, verbosity, profile loading, the drive-file caution, units.

Nothing here imports numpy: the heavy modules are imported inside the
functions that need them.
"""

from __future__ import annotations

import contextlib
import math
import signal
import sys
import time

import click


#: Printed (to stderr) whenever a drive file is written (one text, kept in the library).
from vibsynth.io.caution import DRIVE_CAUTION  # noqa: E402,F401


def fail(message: str) -> "NoReturn":  # noqa: F821
    """Raise a click usage error that the entry point prints as one line (exit 2)."""
    raise click.UsageError(" ".join(str(message).split()))


#: Exact metres per inch (international inch, 1959).
METRE_PER_INCH = 0.0254

#: PROFILE value that reads the profile from standard input.
STDIN = "-"


class Session:
    """What one invocation has said so far: verbosity, warnings (each once), the drive-file caution.

    Kept in the root click context (``ctx.obj``); :func:`session` finds it.
    Warnings are held until the command ends (or a drive file is written) and
    then printed, one line each: a command that ends in bad input prints its
    one error line only.
    """

    def __init__(self, verbosity: int = 0):
        self.verbosity = verbosity
        self.started = time.perf_counter()
        self.warnings: list[str] = []
        self._pending: list[str] = []
        self.drive_written = False
        self.caution_shown = False

    def warn(self, message) -> None:
        """Record a warning (printed as ``vibsynth: warning: ...`` by :meth:`flush`), each distinct message once."""
        text = " ".join(str(message).split())
        if text and text not in self.warnings:
            self.warnings.append(text)
            self._pending.append(text)

    def flush(self) -> None:
        """Print the warnings not printed yet."""
        for text in self._pending:
            click.echo(f"vibsynth: warning: {text}", err=True)
        self._pending.clear()

    def discard(self) -> None:
        """Drop the warnings not printed yet (the command ended in an error line)."""
        self._pending.clear()

    def note(self, message: str) -> None:
        """A progress note on stderr, only with -v."""
        if self.verbosity > 0:
            click.echo(f"vibsynth: {' '.join(str(message).split())} "
                       f"[{time.perf_counter() - self.started:.2f} s]", err=True)

    def caution(self) -> None:
        """The warnings so far, then the drive-file caution on stderr (once per invocation)."""
        self.flush()
        if not self.caution_shown:
            self.caution_shown = True
            click.echo(DRIVE_CAUTION, err=True)


_FALLBACK = Session()


def session() -> Session:
    """The current invocation's :class:`Session` (a module-level one outside a click context)."""
    ctx = click.get_current_context(silent=True)
    if ctx is not None:
        root = ctx.find_root()
        if isinstance(root.obj, Session):
            return root.obj
    return _FALLBACK


def is_quiet(command_quiet: bool = False) -> bool:
    """True when the command's --quiet or the group's -q asked for no summary."""
    return bool(command_quiet) or session().verbosity < 0


def note(message: str) -> None:
    """A progress note on stderr, only with ``vibsynth -v``."""
    session().note(message)


def caution() -> None:
    """Print the drive-file caution on stderr (once per invocation)."""
    session().caution()


def mark_drive_written() -> None:
    """Remember that a drive file exists now: the caution will reach stderr however the command ends."""
    session().drive_written = True


def read_stdin_profile():
    """A profile from standard input: TOML when the text has a ``[[`` table or a ``key =`` line, else CSV."""
    from vibsynth.errors import InputError
    from vibsynth.profile.files import parse_csv_profile
    from vibsynth.profile.multichannel import parse_any_toml as parse_toml_profile

    text = sys.stdin.read()
    if not text.strip():
        raise InputError("no profile on stdin; pipe a TOML profile or a two-column CSV table (Hz, g^2/Hz)", "<stdin>")
    if looks_like_toml(text):
        return parse_toml_profile(text, source="<stdin>")
    return parse_csv_profile(text, source="<stdin>")


def looks_like_toml(text: str) -> bool:
    r"""Sniff a profile's text: TOML has ``[[breakpoints]]`` tables or ``key = value`` lines, a CSV table has neither.

    Examples
    --------
    >>> looks_like_toml("[[breakpoints]]\nfrequency = 20\nasd = 0.04\n")
    True
    >>> looks_like_toml("# Hz, g^2/Hz\n20,0.04\n2000,0.04\n")
    False
    """
    for line in text.splitlines():
        stripped = line.split("#", 1)[0].strip()
        if not stripped:
            continue
        if stripped.startswith("[") or "=" in stripped:
            return True
    return False


def load_profile(spec: str, grms: float | None = None, level_db: float | None = None):
    """Read a profile (file, preset name, or ``-`` for stdin; multi-channel TOML too) and apply an optional rescale."""
    from vibsynth.profile.multichannel import MultiChannelProfile, read_any_profile

    profile = read_stdin_profile() if spec == STDIN else read_any_profile(spec)
    if isinstance(profile, MultiChannelProfile):
        note(f"profile {profile.name}: {profile.channel_count} channels ({', '.join(profile.channel_names)}), "
             f"{profile.frequency_min_hz:g}-{profile.frequency_max_hz:g} Hz")
        if grms is not None:
            fail("--grms rescales one channel; for a multi-channel profile give 'grms' in each [[channels]] table "
                 "or use --level-db")
        return profile.scaled_db(level_db) if level_db is not None else profile
    note(f"profile {profile.name}: {profile.frequency_min_hz:g}-{profile.frequency_max_hz:g} Hz, "
         f"{profile.grms:.4g} g RMS")
    if grms is not None and level_db is not None:
        fail("give --grms or --level-db, not both")
    if grms is not None:
        profile = profile.scaled_to_grms(grms)
    if level_db is not None:
        profile = profile.scaled_db(level_db)
    return profile


def amplitude_options(spec: str, kurtosis=None, skewness=None, clip=None, kurtosis_model=None, burst_s=None) -> dict:
    """The non-Gaussian options of a drive: those given, else the profile file's ``[amplitude]`` table.

    Any of --kurtosis, --skewness, --clip given: the table is not used (the
    options describe the amplitude alone).  Otherwise the table's model,
    kurtosis, skewness and burst_s are the defaults, and --kurtosis-model and
    --burst override its model and burst duration.
    """
    chosen = {"kurtosis": kurtosis, "skewness": skewness, "clip": clip,
              "kurtosis_model": kurtosis_model or "transform", "burst_s": burst_s}
    if kurtosis is not None or skewness is not None or clip is not None or spec == STDIN:
        return chosen
    from vibsynth.profile.files import read_amplitude_section

    table = read_amplitude_section(spec)
    if table is None or table["model"] == "gaussian":
        return chosen
    model = kurtosis_model or table["model"]
    chosen.update(kurtosis=table.get("kurtosis"), kurtosis_model=model)
    if model == "bursts":
        chosen["burst_s"] = burst_s if burst_s is not None else table.get("burst_s")
    else:
        chosen["skewness"] = table.get("skewness")
    note(f"amplitude from {spec} [amplitude]: model {model}, kurtosis {chosen['kurtosis']:.3g}"
         + (f", bursts of {chosen['burst_s']:.3g} s" if chosen.get("burst_s") else ""))
    return chosen


def warn(message: str) -> None:
    """One warning line on stderr (``vibsynth: warning: ...``), each distinct message once."""
    session().warn(message)


def velocity_text(velocity_m_s: float, inch: bool) -> str:
    """A velocity in the invocation's units: m/s, or in/s with --inch."""
    return f"{velocity_m_s / METRE_PER_INCH:.4g} in/s" if inch else f"{velocity_m_s:.4g} m/s"


def length_text(length_m: float, inch: bool) -> str:
    """A displacement in the invocation's units: mm, or in with --inch."""
    return f"{length_m / METRE_PER_INCH:.4g} in" if inch else f"{length_m * 1e3:.4g} mm"


def limits_in_si(stroke_limit, velocity_limit, inch: bool) -> tuple[float | None, float | None]:
    """--stroke-limit and --velocity-limit as given (mm, m/s; or in, in/s with --inch) -> (mm, m/s)."""
    if not inch:
        return stroke_limit, velocity_limit
    stroke_mm = None if stroke_limit is None else stroke_limit * METRE_PER_INCH * 1e3
    velocity_m_s = None if velocity_limit is None else velocity_limit * METRE_PER_INCH
    return stroke_mm, velocity_m_s


def check_limits_in_inches(profile, stroke_limit_in, velocity_limit_in_s) -> None:
    """With --inch, refuse a profile beyond the rig limits in the units they were given (in, in/s).

    The same 3-sigma rule as the drive job (which then finds the limits met);
    this only phrases the refusal in inches.
    """
    from vibsynth.errors import InputError

    if stroke_limit_in is not None:
        need = profile.displacement_peak_to_peak_3sigma_m / METRE_PER_INCH
        if need > stroke_limit_in:
            raise InputError(
                f"the profile needs {need:.3g} in peak-to-peak displacement (3 sigma), {need - stroke_limit_in:.3g} in "
                f"({need / stroke_limit_in:.3g} x the limit) beyond the {stroke_limit_in:g} in stroke limit; "
                "refusing to write the drive", "--stroke-limit")
    if velocity_limit_in_s is not None:
        need = 3.0 * profile.velocity_rms_m_s / METRE_PER_INCH
        if need > velocity_limit_in_s:
            raise InputError(
                f"the profile needs {need:.3g} in/s peak velocity (3 sigma), {need - velocity_limit_in_s:.3g} in/s "
                f"({need / velocity_limit_in_s:.3g} x the limit) beyond the {velocity_limit_in_s:g} in/s velocity "
                "limit; refusing to write the drive", "--velocity-limit")


def print_json(data) -> None:
    """JSON on stdout (NaN/inf as null)."""
    import json

    click.echo(json.dumps(json_safe(data), indent=2, allow_nan=False, default=_json_default))


def _json_default(value):
    if hasattr(value, "item"):  # numpy scalars
        return value.item()
    try:
        return float(value)
    except (TypeError, ValueError):
        return str(value)


def is_interactive_stderr() -> bool:
    """True when stderr is a terminal (progress bars are shown only then)."""
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False


#: Records shorter than this many samples show no progress (bar, lines or events): they take a moment.
PROGRESS_MIN_SAMPLES = 1 << 21

#: Without a terminal, a progress line each time the work crosses this many per cent ...
PROGRESS_STEP_PERCENT = 5
#: ... but not sooner than this many seconds after the previous line (the last line always shows).
PROGRESS_MIN_INTERVAL_S = 10.0


class Progress:
    """Progress over a count of samples, on stderr: a click bar, plain lines, JSON lines, or nothing.

    ``enabled`` True with no ``style`` keeps the old behaviour (a bar).  The
    ``lines`` and ``json`` styles print when the work crosses a multiple of
    :data:`PROGRESS_STEP_PERCENT` (at most one line per
    :data:`PROGRESS_MIN_INTERVAL_S`; 0 % and 100 % always), so a run prints at
    most 21 of them whatever its length.  ``what`` names the work in lines and
    events (e.g. ``writing drive.npy``).  Lines after the first say about how
    long is left, from the rate so far (s).

    ``pass_weights`` splits ``length`` into equal passes of unequal cost
    (e.g. ``(1.0, 0.35)``: the second pass takes about 0.35 x the time of the
    first per sample); the time left and the terminal bar follow the weighted
    work, the lines and events still count samples.

    Examples
    --------
    >>> with Progress(False, 100, "x") as progress:
    ...     progress(50)
    >>> Progress(False, 200, "x", pass_weights=(1.0, 0.5)).work(150)
    1.25

    References
    ----------
    click.progressbar (the terminal bar); JSON Lines (one RFC 8259 object per line).
    """

    def __init__(self, enabled: bool, length: int, label: str, style: str | None = None, what: str | None = None,
                 pass_weights: tuple = (1.0,)):
        self.style = (style or "bar") if enabled else None
        self.length = max(int(length), 1)
        self.label = label
        self.what = what or label
        self.pass_weights = tuple(float(w) for w in pass_weights) or (1.0,)
        self.done = 0
        self.started = time.monotonic()
        self._last_step = -1
        self._last_time = None
        self._bar_units = 0
        self.bar = (click.progressbar(length=self._units(self.length), label=label, file=sys.stderr)
                    if self.style == "bar" else None)

    def work(self, done: int) -> float:
        """Weighted work of ``done`` samples, in units of one first-pass record (see ``pass_weights``)."""
        size = self.length / len(self.pass_weights)
        return sum(weight * min(max(done - index * size, 0.0), size)
                   for index, weight in enumerate(self.pass_weights)) / size

    def _units(self, done: int) -> int:
        """The bar's position for ``done`` samples: weighted work in thousandths of a first-pass record."""
        return int(round(1000 * self.work(done))) if len(self.pass_weights) > 1 else int(done)

    def __enter__(self):
        if self.bar is not None:
            self.bar.__enter__()
        elif self.style is not None:
            self._emit(0, force=True)
        return self

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.__exit__(*exc)

    def __call__(self, samples: int) -> None:
        if self.style is None:
            return
        self.done = min(self.done + int(samples), self.length)
        if self.bar is not None:
            units = self._units(self.done)
            self.bar.update(units - self._bar_units)
            self._bar_units = units
            return
        percent = 100.0 * self.done / self.length
        step = int(percent // PROGRESS_STEP_PERCENT)
        if step > self._last_step:
            self._emit(step, force=self.done >= self.length)

    def _emit(self, step: int, force: bool = False) -> None:
        now = time.monotonic()
        if not force and self._last_time is not None and now - self._last_time < PROGRESS_MIN_INTERVAL_S:
            return
        self._last_step, self._last_time = step, now
        percent = 100.0 * self.done / self.length
        elapsed = now - self.started
        if self.style == "json":
            import json

            click.echo(json.dumps({"event": "progress", "what": self.what, "done_samples": self.done,
                                   "total_samples": self.length, "percent": round(percent, 1),
                                   "elapsed_s": round(elapsed, 1)}), err=True)
        else:
            left = ""
            if 0 < self.done < self.length:
                done_work = self.work(self.done)
                left = f", about {elapsed * (self.work(self.length) - done_work) / done_work:.0f} s left"
            click.echo(f"vibsynth: {self.what}: {percent:3.0f} % ({self.done} of {self.length} samples, "
                       f"{elapsed:.0f} s{left})", err=True)


def json_safe(value):
    """Replace NaN/inf (not valid JSON) with None, recursively through dicts and lists."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    return value


@contextlib.contextmanager
def terminate_as_interrupt():
    """Turn SIGTERM into KeyboardInterrupt (while writing: temporary files removed; in a batch: workers shut down)."""

    def _raise(signum, frame):  # noqa: ARG001
        raise KeyboardInterrupt

    try:
        previous = signal.signal(signal.SIGTERM, _raise)
    except (ValueError, OSError):  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


@contextlib.contextmanager
def record_mapper(scheduler: str | None, workers: int | None, records: int):
    """Where a Monte-Carlo makes its records: a Dask mapper with --workers/--scheduler, else None (this process).

    Blocks of about ``records / (4 x workers)`` records per task, so each worker gets several
    tasks (balance) and each task does enough work to hide Dask's cost per task.  Without
    Dask installed, one :class:`~vibsynth.errors.InputError` line says what to install.
    """
    if (workers is None and not scheduler) or not records:
        yield None
        return
    from vibsynth import batch as batches

    with batches.dask_client(scheduler, workers) as client:
        count = batches.worker_count(client)
        mapper = batches.dask_mapper(client, max(1, records // (4 * count)))
        note(f"Monte-Carlo on Dask, {count} workers, {mapper.block_records} record(s) per task")
        yield mapper
