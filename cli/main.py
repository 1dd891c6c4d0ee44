"""The ``vibsynth`` command: a thin click shell over :mod:`synth`.

Every command parses its options, calls :mod:`synth`, and formats the result.
Bad input of any kind (profile files, options, drive files) ends with one line
on stderr and exit status 2, never a traceback.
"""

from __future__ import annotations

import math
import sys

import click

from vibsynth import __version__
from vibsynth.errors import InputError


class _Group(click.Group):
    """Click group that lists commands in the order they were added."""

    def list_commands(self, ctx):
        return list(self.commands)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="vibsynth")
def cli():
    """Random-vibration drive synthesis from ASD breakpoint tables, with independent verification.

    PROFILE arguments take a TOML profile, a two-column CSV (Hz, g^2/Hz), or the
    name of a bundled preset (see `vibsynth presets`).

    Drive files are open-loop signals: play them only through a closed-loop
    controller with alarm and abort limits, within the shaker's stroke,
    velocity and force limits, under your lab's procedures.
    """


class _FiniteNumber:
    """Mixin for click's float types: refuse nan and +/-inf, which ``float()`` and range checks let through."""

    def convert(self, value, param, ctx):
        number = super().convert(value, param, ctx)
        if isinstance(number, float) and not math.isfinite(number):
            self.fail(f"{value!r} is not a finite number", param, ctx)
        return number


def _finite(param_type: click.ParamType) -> click.ParamType:
    """The same float type (range, metavar and help unchanged) that also refuses nan and +/-inf."""
    if not isinstance(param_type, click.types.FloatParamType) or isinstance(param_type, _FiniteNumber):
        return param_type
    kind = type(f"Finite{type(param_type).__name__}", (_FiniteNumber, type(param_type)), {})
    finite = kind.__new__(kind)
    finite.__dict__.update(vars(param_type))
    return finite


def _register() -> None:
    """Add the commands in the order a user meets them (the main job first)."""
    from vibsynth.cli import generate_cmd, info_cmd, peaks_cmd, run_cmd, verify_cmd
    from vibsynth.cli import equivalent_cmd, fit_cmd, response_cmd, severity_cmd

    for command in (run_cmd.run, info_cmd.info, generate_cmd.generate, verify_cmd.verify, peaks_cmd.peaks,
                    response_cmd.response, severity_cmd.severity, equivalent_cmd.equivalent, fit_cmd.fit,
                    info_cmd.presets):
        cli.add_command(command)
    # Every number a user types must be finite: nan or inf reaching synth/ could only fail late or obscurely.
    for command in cli.commands.values():
        for param in command.params:
            param.type = _finite(param.type)


_register()


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def main(argv: list[str] | None = None) -> int:
    """Entry point of the console script; returns (and exits with) the status code.

    0: success (verify: pass); 1: verify found the drive out of tolerance;
    2: bad input, reported as one line on stderr.
    """
    prog = "vibsynth"
    try:
        status = cli.main(args=argv, prog_name=prog, standalone_mode=False)
    except InputError as error:
        click.echo(f"{prog}: error: {error.one_line()}", err=True)
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
        where = f"{error.filename}: " if getattr(error, "filename", None) else ""
        click.echo(f"{prog}: error: {where}{_one_line(error.strerror or error)}", err=True)
        status = 2
    if status is None:
        status = 0
    if argv is None:
        sys.exit(status)
    return status


if __name__ == "__main__":  # pragma: no cover
    main()
