"""The ``vibsynth`` command: a thin click shell over the :mod:`vibsynth` library.

Every command parses its options, calls the library, and formats the result.
Bad input of any kind (profile files, options, drive files) ends with one line
on stderr and exit status 2, never a traceback.  Library warnings
(:class:`vibsynth.errors.VibsynthWarning`) raised while a command runs are
printed as one line each, ``vibsynth: warning: ...``, each distinct message
once.  Library errors name parameters (``clip``, ``rate_hz``); the one line
names the option instead (:data:`OPTION_NAMES`).

Start-up stays light: the commands import numpy, scipy and matplotlib only
inside their bodies, so ``vibsynth --help`` loads none of them.
"""

from __future__ import annotations

import re
import sys
import warnings

import click

from vibsynth.cli.common import Session
from vibsynth.errors import InputError, VibsynthWarning

#: Library parameter name -> the option that sets it: the one table used to phrase library errors.
OPTION_NAMES = {
    "amplitude": "--amplitude",
    "clip": "--clip",
    "dof": "--dof",
    "duration": "--duration",
    "duration_s": "--duration",
    "full_scale_g": "--full-scale",
    "grms": "--grms",
    "grms_tolerance_percent": "--grms-tolerance",
    "kurtosis": "--kurtosis",
    "kurtosis_model": "--kurtosis-model",
    "burst_s": "--burst",
    "band": "--band",
    "points": "--points",
    "margin_db": "--margin",
    "level_db": "--level-db",
    "loop": "--loop",
    "memory_budget_bytes": "--memory-budget",
    "memory_budget_mb": "--memory-budget",
    "overwrite": "--overwrite",
    "paper": "--paper",
    "min_fraction_within": "--min-fraction",
    "quantities": "--quantities",
    "ramp": "--ramp",
    "ramp_s": "--ramp",
    "rest_taper": "--rest-taper",
    "rate": "--rate",
    "rate_hz": "--rate",
    "records": "--records",
    "record_duration_s": "--record-duration",
    "record_rate_hz": "--record-rate",
    "report_dir": "--report",
    "resolution": "--resolution",
    "resolution_hz": "--resolution",
    "scale": "--scale",
    "seed": "--seed",
    "skewness": "--skewness",
    "stroke_limit_mm": "--stroke-limit",
    "subtype": "--subtype",
    "target_dof": "--dof",
    "tolerance_db": "--tolerance",
    "velocity_limit_m_s": "--velocity-limit",
}

#: In a message, a parameter written as code (`clip`) or a snake_case name with a unit suffix (rate_hz).
_CODE_NAME = re.compile(r"`([a-z][a-z0-9_]*)`")
_SNAKE_NAME = re.compile(r"(?<![\w-])([a-z][a-z0-9]*(?:_[a-z0-9]+)+)(?![\w-])")


def option_name(parameter: str | None) -> str | None:
    """The option for a library parameter name (``rate_hz`` -> ``--rate``); other text unchanged."""
    if parameter is None:
        return None
    return OPTION_NAMES.get(str(parameter), parameter)


def cli_message(error: InputError) -> str:
    """A library error as the one line the command line prints: parameter names replaced by option names.

    Only errors about parameters are rephrased (no ``source``, or a ``source``
    that is a parameter name); an error about a file (a sidecar's ``scale``
    key, a profile's row) is printed as it is.  Then the ``source`` and
    ``location`` fields are mapped, and in the message the parameters written
    as code (```clip```) and snake_case parameters (``rate_hz``).  Ordinary
    words ("rate 4000 Hz must exceed ...") stay: the field in front names the option.
    """
    source = str(error.source) if error.source else None
    text = " ".join(str(error.message).split())
    text = _CODE_NAME.sub(lambda m: OPTION_NAMES.get(m.group(1), m.group(0)), text)
    if source is not None and source not in OPTION_NAMES:
        # about a file: a snake_case location is a parameter checked while reading it (``resolution_hz``);
        # a plain or dotted one is a key of the file itself (a sidecar's ``scale``), printed as it is
        location = str(error.location) if error.location else None
        if location is not None and "_" in location and "." not in location:
            location = option_name(location)
        return InputError(text, source, location).one_line()
    text = _SNAKE_NAME.sub(lambda m: OPTION_NAMES.get(m.group(1), m.group(1)), text)
    return InputError(text, option_name(error.source), option_name(error.location)).one_line()


class _Group(click.Group):
    """Click group that lists commands in the order they were added."""

    def list_commands(self, ctx):
        return list(self.commands)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(package_name="vibsynth", prog_name="vibsynth")
@click.option("-q", "--quiet", "quiet", is_flag=True,
              help="No summaries and no progress bars: only requested JSON on stdout; warnings, errors and the "
                   "drive-file caution still reach stderr.")
@click.option("-v", "--verbose", "verbose", is_flag=True,
              help="Also print progress notes on stderr (the profile read, the rate chosen, what is written, "
                   "with the time taken).")
@click.pass_context
def cli(ctx, quiet, verbose):
    """Random-vibration drive synthesis from ASD breakpoint tables, with independent verification.

    PROFILE arguments take a TOML profile, a two-column CSV (Hz, g^2/Hz), the
    name of a bundled preset (see `vibsynth presets`), or - to read the
    profile (TOML or CSV) from stdin.

    Drive files are open-loop signals: play them only through a closed-loop
    controller with alarm and abort limits, within the shaker's stroke,
    velocity and force limits, under your lab's procedures.
    """
    if quiet and verbose:
        raise click.UsageError("give -q/--quiet or -v/--verbose, not both")
    state = ctx.find_root().obj
    if isinstance(state, Session):
        state.verbosity = -1 if quiet else (1 if verbose else 0)


def _register() -> None:
    """Add the commands in the order a user meets them (the main job first)."""
    from vibsynth.cli import batch_cmd, derive_cmd, generate_cmd, info_cmd, peaks_cmd, run_cmd, verify_cmd
    from vibsynth.cli import equivalent_cmd, fit_cmd, response_cmd, severity_cmd

    for command in (run_cmd.run, info_cmd.info, generate_cmd.generate, verify_cmd.verify, derive_cmd.derive,
                    peaks_cmd.peaks,
                    response_cmd.response, severity_cmd.severity, equivalent_cmd.equivalent, fit_cmd.fit,
                    batch_cmd.batch, info_cmd.presets):
        cli.add_command(command)


_register()


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _show_warning(state: Session, fallback):
    """A ``warnings.showwarning`` that prints VibsynthWarnings as one line each (once), others as Python does."""

    def show(message, category, filename, lineno, file=None, line=None):
        if isinstance(category, type) and issubclass(category, VibsynthWarning):
            state.warn(message)
        else:
            fallback(message, category, filename, lineno, file, line)

    return show


def main(argv: list[str] | None = None) -> int:
    """Entry point of the console script; returns (and exits with) the status code.

    0: success (verify: pass); 1: verify found the drive out of tolerance;
    2: bad input, reported as one line on stderr.
    """
    prog = "vibsynth"
    state = Session()
    status = None
    with warnings.catch_warnings():
        warnings.simplefilter("always", VibsynthWarning)
        warnings.showwarning = _show_warning(state, warnings.showwarning)
        try:
            status = cli.main(args=argv, prog_name=prog, standalone_mode=False, obj=state)
        except InputError as error:
            click.echo(f"{prog}: error: {cli_message(error)}", err=True)
            status = 2
        except click.exceptions.Exit as done:
            status = done.exit_code
        except click.Abort:
            click.echo(f"{prog}: aborted", err=True)
            status = 130
        except click.ClickException as error:
            ctx_name = getattr(getattr(error, "ctx", None), "command_path", prog) or prog
            click.echo(f"{ctx_name}: error: {_one_line(error.format_message())} (see '{ctx_name} --help')", err=True)
            status = 2
        except OSError as error:
            name = str(getattr(error, "filename", None) or "")
            where = f"{name if name.isprintable() else repr(name)}: " if name else ""
            click.echo(f"{prog}: error: {where}{_one_line(error.strerror or error)}", err=True)
            status = 2
        finally:
            if status == 2 and not state.drive_written:
                state.discard()  # bad input: the one error line says it all
            state.flush()
            if state.drive_written:
                state.caution()
    if status is None:
        status = 0
    state.note(f"exit status {status}")
    if argv is None:
        sys.exit(status)
    return status


if __name__ == "__main__":  # pragma: no cover
    main()
