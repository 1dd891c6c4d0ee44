"""`vibsynth batch`: every job x seed of a plan file, generated and verified on a Dask cluster."""

from __future__ import annotations

import contextlib
import sys

import click

from vibsynth.cli import options
from vibsynth.cli.common import (
    terminate_as_interrupt,
    caution,
    is_interactive_stderr,
    is_quiet,
    mark_drive_written,
    note,
    print_json,
    warn,
)




def _row_line(row: dict, finished: int, total: int) -> str:
    if row.get("status") == "error":
        return f"vibsynth: batch [{finished}/{total}] {row['file']}: ERROR {row.get('error')}"
    verdict = "pass" if row.get("pass") else "FAIL"
    grms = row.get("grms_error_percent")
    grms_text = f", g RMS {grms:+.2f} %" if isinstance(grms, (int, float)) else ""
    return (f"vibsynth: batch [{finished}/{total}] {row['file']}: {row.get('status')}, {verdict}{grms_text} "
            f"({row.get('wall_time_s')} s)")


@click.command()
@click.argument("plan_file", metavar="PLAN", type=click.Path(dir_okay=False))
@click.option("-o", "--output", "out_dir", required=True, type=click.Path(file_okay=False), metavar="DIR",
              help="Folder for every drive, sidecar and verify.json, and summary.json/summary.csv (created if "
                   "needed; a rerun into the same folder resumes).")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Use a running Dask scheduler (tcp://HOST:PORT); DIR must be reachable at the same path from "
                   "every worker. Default: a local cluster.")
@click.option("--workers", type=click.IntRange(min=1), default=None, metavar="N",
              help="Worker processes of the local cluster (one thread each). Default: one per CPU core.")
@options.json_output.but(help="Print summary.json on stdout.")
@options.quiet
def batch(plan_file, out_dir, scheduler, workers, as_json, command_quiet):
    """Make and verify every drive of a PLAN file (TOML): each job x seed in parallel on Dask.

    Each [[jobs]] table names a profile (file relative to PLAN, or preset),
    duration_s, rate_hz, format, seeds (a list, or seed_count from base_seed)
    and any drive options (level_db or grms, kurtosis, skewness, clip,
    amplitude, ramp_s, ...) and verification limits (tolerance_db, ...); a
    [defaults] table applies to every job. Every drive NAME-seedS.FORMAT and
    its sidecar are byte-identical to `vibsynth generate` with the same
    options; NAME-seedS.verify.json holds its verification; summary.json and
    summary.csv list them all (SHA-256, verdict, g RMS error, worst dB,
    kurtosis, crest factor, time).

    The whole plan is checked before anything runs. A rerun skips the drives
    already finished and never overwrites one; a killed batch loses only the
    drives in flight. Exit status: 0 every drive passed, 1 some failed or
    could not be made, 2 bad plan. Needs Dask: pip install 'vibsynth[cluster]'.

    Drive files are open-loop: play them only through a closed-loop
    controller with alarm and abort limits, within the shaker's stroke,
    velocity and force limits, following your lab's procedures, local codes
    and licensed practice.
    """
    from vibsynth import batch as batches

    quiet = is_quiet(command_quiet)
    batches.require_dask()
    plan = batches.read_plan(plan_file)
    prepared = batches.prepare_batch(plan, out_dir)
    for message in prepared.warnings:
        warn(message)
    total = len(prepared.tasks)
    note(f"{plan.task_count} drives in {plan_file}: {len(prepared.done)} done earlier, {total} to run")
    show_bar = is_interactive_stderr() and not quiet and not as_json and total > 0
    with terminate_as_interrupt(), batches.dask_client(scheduler, workers) as client:
        note(f"Dask client on {client.scheduler.address}")
        bar = click.progressbar(length=total, label="drives", file=sys.stderr) if show_bar else None
        with bar if bar is not None else contextlib.nullcontext():

            def progress(row, finished, count):
                if row.get("status") == "made":
                    mark_drive_written()
                if bar is not None:
                    bar.update(1)
                elif not quiet and not as_json:
                    click.echo(_row_line(row, finished, count), err=True)

            result = batches.run_batch(prepared, client, progress)
    counts = result.summary["counts"]
    if as_json:
        print_json(result.summary)
    elif not quiet:
        click.echo(f"{counts['drives']} drives in {prepared.folder}: {counts['made']} made, "
                   f"{counts['verified_only']} verified only, {counts['done_earlier']} done earlier; "
                   f"{counts['passed']} pass, {counts['failed']} FAIL, {counts['errors']} errors")
        for row in result.rows:
            if row["status"] == "error":
                click.echo(f"  {row['file']}: ERROR {row['error']}")
            elif not row["pass"]:
                click.echo(f"  {row['file']}: FAIL, see {row['verify_file']}")
        click.echo(f"  summary   {result.paths['json']}, {result.paths['csv']}")
    caution()
    click.get_current_context().exit(0 if result.passed else 1)


__all__ = ["batch"]
