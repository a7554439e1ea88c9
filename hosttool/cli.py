"""The command line: parse, call one function, print. Errors become one line and exit 2.

Each command imports its module of hosttool.commands inside its function, on purpose: the
heavy imports (numpy, scipy, numba, matplotlib) are paid only by the commands that use them,
and ``--help`` or ``--version`` pays none.
"""

from __future__ import annotations

import functools
import json
import os
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any, TypeVar

import click

from hosttool import __version__
from hosttool.errors import HostToolError
from hosttool.util.quick_exit import quick_exit

F = TypeVar("F", bound=Callable[..., Any])
#: "quick": set by a command whose process ``run`` may end without the interpreter's teardown.
_EXIT = {"quick": False}


def _emit_json(data: object) -> None:
    click.echo(json.dumps(data, indent=2, sort_keys=False))


def _warn(messages: tuple[str, ...] | list[str]) -> None:
    for message in messages:
        click.echo(f"warning: {message}", err=True)


def guarded(func: F) -> F:
    """Turn HostToolError into one line on stderr and exit status 2 (traceback with --debug)."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return func(*args, **kwargs)
        except HostToolError as exc:
            if click.get_current_context().find_root().params.get("debug"):
                import traceback  # deferred on purpose: only --debug prints one

                traceback.print_exc()
            click.echo(f"hosttool: error: {exc}", err=True)
            sys.exit(2)

    return wrapper  # type: ignore[return-value]


class OneLineGroup(click.Group):
    """The command group, whose usage errors (an unknown command or option, a bad option
    value, a folder given as a file) are one line on stderr and exit status 2, like every
    other bad input; ``--help`` and ``--version`` are click's own."""

    def main(self, *args: Any, **kwargs: Any) -> Any:
        kwargs["standalone_mode"] = False
        try:
            return super().main(*args, **kwargs)
        except click.exceptions.Exit as exc:          # --help, --version
            sys.exit(exc.exit_code)
        except click.ClickException as exc:
            if type(exc).__name__ == "NoArgsIsHelpError":   # click >= 8.2: bare command
                exc.show()                                    # its help page, as click does
                sys.exit(exc.exit_code)
            click.echo(f"hosttool: error: {usage_line(exc)}", err=True)
            sys.exit(2)
        except click.Abort:
            click.echo("hosttool: error: interrupted", err=True)
            sys.exit(1)


def usage_line(exc: click.ClickException) -> str:
    """A usage error as one line: the command, click's message, where to find help."""
    message = " ".join(exc.format_message().split())
    ctx = getattr(exc, "ctx", None)
    if ctx is None:
        return message
    command = ctx.command_path.partition(" ")[2]
    return f"{command + ': ' if command else ''}{message} (see {ctx.command_path} --help)"


@click.group(cls=OneLineGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="hosttool")
@click.option("--debug", is_flag=True, help="Show the traceback of an error (for bug reports).")
def main(debug: bool) -> None:
    """Integer constants, C headers, proofs and calibration blocks for bridge sensors."""


@main.command()
@click.argument("spec", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--json", "as_json", is_flag=True, help="Print the budget as one JSON object.")
@guarded
def check(spec: Path, as_json: bool) -> None:
    """Validate SPEC and print the sensor/ADC budget."""
    from hosttool.commands.check import budget_json, budget_text, run_check

    budget = run_check(spec)
    if as_json:
        _emit_json(budget_json(budget))
    else:
        click.echo(budget_text(budget, with_warnings=False), nl=False)
    _warn(budget.warnings)
    _EXIT["quick"] = True           # printed only: nothing left to close (see run())


@main.command()
@click.argument("spec", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--json", "as_json", is_flag=True, help="Print the design as one JSON object.")
@guarded
def design(spec: Path, as_json: bool) -> None:
    """Resolve every constant of SPEC with its format, headroom and error bound."""
    from hosttool.commands.design import design_json, design_text
    from hosttool.design.resolve import make_design
    from hosttool.spec.schema import load_spec

    resolved = make_design(load_spec(spec))
    if as_json:
        _emit_json(design_json(resolved))
    else:
        click.echo(design_text(resolved, with_warnings=False), nl=False)
    _warn(list(resolved.warnings))
    _EXIT["quick"] = True           # printed only (the design cache file is closed): run()


@main.command()
@click.argument("spec", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--calibration", "calibration", type=click.Path(dir_okay=False, path_type=Path),
              help="Verify one unit's constants (a calibrate result) instead of the nominal.")
@click.option("--samples", default=1_000_000, show_default=True, type=int,
              help="Length of the long random run (other tests scale with it).")
@click.option("--seed", default=0, show_default=True, type=int, help="Seed of the random tests.")
@click.option("--engine", default="python", show_default=True,
              help="python (the bit-exact model), c (the compiled firmware) or both.")
@click.option("--json", "as_json", is_flag=True, help="Print the results as one JSON object.")
@click.option("--report", "report", type=click.Path(dir_okay=False, path_type=Path),
              help="Write a self-contained HTML report with plots.")
@guarded
def verify(spec: Path, calibration: Path | None, samples: int, seed: int, engine: str,
           as_json: bool, report: Path | None) -> None:
    """Prove the integer firmware against its float64 reference (exit 0 pass, 1 fail)."""
    started = time.perf_counter()
    from hosttool.commands.verify import run_verify

    verification, text = run_verify(spec, calibration=calibration, samples=samples, seed=seed,
                                    engine=engine, as_json=as_json, report=report,
                                    started=started)
    click.echo(text, nl=False)
    _EXIT["quick"] = True
    sys.exit(0 if verification.passed else 1)


@main.command()
@click.argument("spec", type=click.Path(dir_okay=False, path_type=Path))
@click.option("-o", "--output", "folder", required=True, type=click.Path(path_type=Path),
              help="Folder to write the headers into (created if missing).")
@click.option("--calibration", "calibration", type=click.Path(dir_okay=False, path_type=Path),
              help="A passed unit's CAL.json: its constants become the compiled-in defaults.")
@click.option("--force", is_flag=True,
              help="Overwrite headers not generated by hosttool or edited since, and render "
              "a design whose calibration blocks would no longer fit the replaced headers.")
@guarded
def render(spec: Path, folder: Path, calibration: Path | None, force: bool) -> None:
    """Write the C headers of SPEC (design and calibration block) into a folder."""
    from hosttool.commands.render import render_spec

    for line in render_spec(spec, folder, calibration=calibration, force=force):
        click.echo(line)


@main.command()
@click.option("-o", "--output", "folder", required=True,
              type=click.Path(file_okay=False, path_type=Path),
              help="Folder to write the firmware into (created if missing).")
@click.option("--spec", "spec", type=click.Path(dir_okay=False, path_type=Path),
              help="Also render this spec's headers (include/) and check vectors (vectors/).")
@click.option("--force", is_flag=True, help="Overwrite files edited since hosttool wrote them; "
              "render headers that change the meaning of calibration blocks.")
@guarded
def firmware(folder: Path, spec: Path | None, force: bool) -> None:
    """Write the C reference firmware with its Makefile and CMakeLists.txt into a folder."""
    from hosttool.commands.firmware import firmware_text, run_firmware

    written = run_firmware(folder, spec=spec, force=force)
    click.echo(firmware_text(written, folder, with_spec=spec is not None), nl=False)


@main.command()
@click.argument("path", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--example", "example", default="hive_scale", show_default=True,
              help="Which bundled example to start from.")
@click.option("--force", is_flag=True, help="Overwrite PATH if it exists.")
@guarded
def new(path: Path, example: str, force: bool) -> None:
    """Write a commented starter spec to PATH."""
    from hosttool.commands.new import write_starter

    written = write_starter(path, example, force=force)
    click.echo(f"wrote {written} (from example {example!r}); edit it, then: "
               f"hosttool check {written}")


@main.command()
@click.argument("folder", required=False, type=click.Path(file_okay=False, path_type=Path))
@click.option("--example", "example", default="hive_scale", show_default=True,
              help="Which bundled example to run.")
@guarded
def demo(folder: Path | None, example: str) -> None:
    """Run the whole flow on a bundled example into FOLDER (default: a new folder here)."""
    from hosttool.commands.demo import run_demo

    for line in run_demo(folder, example):
        click.echo(line)


@main.command()
@click.argument("spec", type=click.Path(dir_okay=False, path_type=Path))
@click.argument("readings", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--serial", "serial", required=True, help="The unit to calibrate.")
@click.option("-o", "--output", "out", required=True,
              type=click.Path(dir_okay=False, path_type=Path), help="CAL.json to write.")
@click.option("--cal-time", "cal_time", metavar="ISO8601",
              help="Calibration time in UTC (default: the unit's latest time_utc reading).")
@click.option("--json", "as_json", is_flag=True,
              help="Print one JSON object: serial, verdict, image, revision, reasons.")
@guarded
def calibrate(spec: Path, readings: Path, serial: str, out: Path, cal_time: str | None,
              as_json: bool) -> None:
    """Fit one unit's constants from READINGS and judge them (exit 0 pass, 1 fail)."""
    from hosttool.commands.calibrate import result_json, run_calibrate

    result, text = run_calibrate(spec, readings, serial=serial, out=out, cal_time=cal_time)
    if as_json:
        _emit_json(result_json(result, out))
    else:
        click.echo(text, nl=False)
    sys.exit(0 if result.passed else 1)


@main.command()
@click.argument("spec", type=click.Path(dir_okay=False, path_type=Path))
@click.argument("calibration", type=click.Path(dir_okay=False, path_type=Path))
@click.option("-o", "--output", "out", required=True,
              type=click.Path(dir_okay=False, path_type=Path), help="Image file to write.")
@click.option("--merge", "merge", type=click.Path(dir_okay=False, path_type=Path),
              help="Firmware Intel HEX to merge the block into (no overlap allowed).")
@click.option("--bin", "as_bin", is_flag=True, help="Write the block's area as raw bytes.")
@guarded
def image(spec: Path, calibration: Path, out: Path, merge: Path | None, as_bin: bool) -> None:
    """Write a passed unit's calibration block as Intel HEX at the spec's flash address."""
    from hosttool.commands.image import run_image

    click.echo(run_image(spec, calibration, out=out, merge=merge, as_bin=as_bin), nl=False)


@main.command()
@click.argument("spec", type=click.Path(dir_okay=False, path_type=Path))
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--json", "as_json", is_flag=True, help="Print the block as one JSON object.")
@click.option("--address", "address", metavar="ADDRESS",
              help="Where the block sits (default: the spec's target.calblock_address).")
@click.option("--base", "base", metavar="ADDRESS",
              help="For a .bin flash readback: the address of its first byte.")
@guarded
def inspect(spec: Path, file: Path, as_json: bool, address: str | None,
            base: str | None) -> None:
    """Decode and check the calibration block in FILE (HEX image or full-flash readback, or
    .bin: the area image --bin writes, or a readback with --base)."""
    from hosttool.commands.inspect import run_inspect

    data, text = run_inspect(spec, file, as_json=as_json, address=address, base=base)
    if as_json:
        _emit_json(data)
    else:
        click.echo(text, nl=False)


@main.command()
@click.argument("spec", type=click.Path(dir_okay=False, path_type=Path))
@click.argument("readings", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--out", "out", required=True, type=click.Path(file_okay=False, path_type=Path),
              help="Folder for the images (created if missing).")
@click.option("--db", "db", envvar="HOSTTOOL_DB", metavar="PATH|URI",
              help="Production record: an SQLite file, or postgresql://USER@HOST:PORT/DBNAME "
              "for a server shared by the stations (default: OUT/production.sqlite; "
              "environment HOSTTOOL_DB).")
@click.option("--station", "station", help="Name of this station in the record (default: "
              "the host name).")
@click.option("--lot", "lot", help="Lot name in the record (default: the readings file's "
              "name without its extension).")
@click.option("--operator", "operator", default="", help="Who runs the station (recorded).")
@click.option("--register", "register", type=click.Path(dir_okay=False, path_type=Path),
              help="The register of reference standards (TOML) the readings name.")
@click.option("--standard", "standards", multiple=True, metavar="ID",
              help="A standard of the register used for every reading of the lot (repeat "
              "for several); readings may also name theirs in a standards column.")
@click.option("--certificates", is_flag=True,
              help="Write a certificate (HTML) beside the image of every passed unit.")
@click.option("--json", "as_json", is_flag=True,
              help="Print one JSON object: counts and one object per unit.")
@click.option("--recalibrate", is_flag=True,
              help="Record new constants for serials already recorded (history kept).")
@click.option("--cal-time", "cal_time", metavar="ISO8601",
              help="Calibration time in UTC for every unit (default: each unit's latest "
              "time_utc reading).")
@click.option("--jobs", "jobs", default=lambda: min((os.cpu_count() or 1) + 1, 8),
              show_default="one more than the machine's cores, at most 8",
              type=click.IntRange(1, 64),
              help="Worker processes for the calibration arithmetic (small lots use one); "
              "one more than the cores keeps them busy while a worker waits for its "
              "images to reach the disk.")
@guarded
def batch(spec: Path, readings: Path, out: Path, db: str | None, station: str | None,
          lot: str | None, operator: str, register: Path | None, standards: tuple[str, ...],
          certificates: bool, as_json: bool, recalibrate: bool, cal_time: str | None,
          jobs: int) -> None:
    """Calibrate, image and record a lot (exit 0 all passed, 1 some failed, 2 bad input)."""
    from hosttool.commands.batch import batch_json, batch_text
    from hosttool.commands.calibrate import cal_time_option
    from hosttool.production.batch import run_batch

    def progress(stream: Any, count: int) -> Any:
        with click.progressbar(stream, length=count, label="units", file=sys.stderr) as bar:
            yield from bar

    summary = run_batch(spec, readings, out=out, db=db, station=station,
                        recalibrate=recalibrate, cal_time=cal_time_option(cal_time),
                        jobs=jobs, lot=lot, operator=operator, register=register,
                        lot_standards=standards, certificates=certificates,
                        progress=None if as_json else progress)
    if as_json:
        _emit_json(batch_json(summary, readings=readings.name, out=out))
    else:
        click.echo(batch_text(summary, readings=readings.name, out=out), nl=False)
    _EXIT["quick"] = True           # images and record are on disk and closed: see run()
    sys.exit(summary.exit_code)


@main.group()
def record() -> None:
    """Query and export the production record (SQLite file or PostgreSQL server)."""


def _db_option(func: F) -> F:
    return click.option(
        "--db", "db", required=True, envvar="HOSTTOOL_DB", metavar="PATH|URI",
        help="The record: an SQLite file or postgresql://USER@HOST:PORT/DBNAME "
        "(environment HOSTTOOL_DB).")(func)


def _filter_options(func: F) -> F:
    for option in reversed((
            click.option("--lot", "lot", help="Only this lot."),
            click.option("--serial", "serial", help="Only this serial."),
            click.option("--verdict", "verdict", type=click.Choice(["pass", "fail"]),
                         help="Only passed or only failed units."),
            click.option("--station", "station", help="Only this station."),
            click.option("--since", "since", metavar="ISO8601",
                         help="Calibrated at or after this UTC time."),
            click.option("--until", "until", metavar="ISO8601",
                         help="Calibrated before this UTC time."),
            click.option("--all-revisions", "all_revisions", is_flag=True,
                         help="Include superseded revisions (default: current rows only)."))):
        func = option(func)
    return func


@record.command("list")
@_db_option
@_filter_options
@click.option("--json", "as_json", is_flag=True, help="Print a JSON array of rows.")
@guarded
def record_list(db: str, as_json: bool, **filters: Any) -> None:
    """List recorded units (current revisions unless --all-revisions)."""
    from hosttool.commands.record import fetch, list_text, make_filter, row_summary
    from hosttool.production.record import shown

    rows = fetch(db, make_filter(**filters))
    if as_json:
        _emit_json([row_summary(r) for r in rows])
    else:
        click.echo(list_text(rows, shown(db)), nl=False)


@record.command("show")
@click.argument("serial")
@_db_option
@click.option("--json", "as_json", is_flag=True, help="Print every revision's full row.")
@guarded
def record_show(serial: str, db: str, as_json: bool) -> None:
    """Show every revision of one SERIAL with its traceability."""
    from hosttool.commands.record import run_show, show_text

    rows = run_show(db, serial)
    if as_json:
        _emit_json(rows)
    else:
        click.echo(show_text(rows, serial), nl=False)


@record.command("certificate")
@click.argument("serial")
@_db_option
@click.option("-o", "--output", "out", required=True,
              type=click.Path(dir_okay=False, path_type=Path), help="HTML file to write.")
@click.option("--revision", "revision", type=click.IntRange(1), help="A revision other than "
              "the current one.")
@guarded
def record_certificate(serial: str, db: str, out: Path, revision: int | None) -> None:
    """Write the certificate (printable HTML) of one recorded, passed SERIAL."""
    from hosttool.commands.record import run_certificate

    click.echo(run_certificate(db, serial, revision=revision, out=out), nl=False)


@record.command("report")
@click.argument("lot")
@_db_option
@click.option("-o", "--output", "out", required=True,
              type=click.Path(dir_okay=False, path_type=Path), help="HTML file to write.")
@guarded
def record_report(lot: str, db: str, out: Path) -> None:
    """Write the statistics of LOT (HTML with plots): distributions, Cpk, outliers, yield."""
    from hosttool.commands.record import run_report

    click.echo(run_report(db, lot, out=out), nl=False)


@record.command("export")
@_db_option
@_filter_options
@click.option("--format", "fmt", required=True, type=click.Choice(["csv", "json"]),
              help="csv: one line per row, JSON columns as JSON text; json: an array.")
@click.option("-o", "--output", "out", type=click.Path(dir_okay=False, path_type=Path),
              help="File to write (default: standard output).")
@guarded
def record_export(db: str, fmt: str, out: Path | None, **filters: Any) -> None:
    """Export every column of the selected rows."""
    from hosttool.commands.record import make_filter, run_export

    click.echo(run_export(db, make_filter(**filters), fmt=fmt, out=out), nl=False)


@main.command()
@click.argument("spec", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--vary", "vary", multiple=True, metavar="KEY=V1,V2,...", required=True,
              help="A spec key (dotted, e.g. filter.stages[1].cutoff_hz) and its values; "
              "repeat for a grid.")
@click.option("--sort", "sort", default="error", show_default=True,
              help="Figure to sort by: divisions, settling_s, error, cost, error_bound, "
              "mains_rejection_db, output_rate_hz, limit_cycle_lsb.")
@click.option("--jobs", "jobs", default=lambda: min(os.cpu_count() or 1, 8),
              show_default="the machine's cores, at most 8", type=click.IntRange(1, 64),
              help="Worker processes.")
@click.option("--m4", is_flag=True,
              help="Cost as Cortex-M4 instructions per sample, measured under QEMU (slow).")
@click.option("--json", "as_json", is_flag=True, help="Print the variants as one JSON object.")
@click.option("--html", "html", type=click.Path(dir_okay=False, path_type=Path),
              help="Write a page with the Pareto plot and the table.")
@click.option("--save", "save", multiple=True, type=(int, click.Path(dir_okay=False,
              path_type=Path)), metavar="N FILE", help="Write variant N as a spec file.")
@guarded
def explore(spec: Path, vary: tuple[str, ...], sort: str, jobs: int, m4: bool, as_json: bool,
            html: Path | None, save: tuple[tuple[int, Path], ...]) -> None:
    """Evaluate a grid of variants of SPEC and mark the Pareto-optimal ones."""
    from hosttool.commands.explore import run_explore

    _, out = run_explore(spec, vary=vary, sort=sort, jobs=jobs, m4=m4, as_json=as_json,
                         html=html, save=save)
    if isinstance(out, str):
        click.echo(out, nl=False)
    else:
        _emit_json(out)


def run() -> None:
    """The console entry point (and ``python -m hosttool``): ``main``; after a command that
    set ``_EXIT["quick"]`` (verify, which loads numba; batch, whose heap is large; check and
    design, which only print and whose start-up time counts: the teardown alone is about
    20 ms of a 0.1 s ``check``) the process ends at once (util/quick_exit.py). Tests call
    ``main`` in-process and never end here.

    numpy's BLAS gets one thread (``OPENBLAS_NUM_THREADS``, unless the user set it): the
    tool's matrices are small (a unit's fit, a filter design), and OpenBLAS's extra threads
    spin after start-up (about 0.1 s of CPU per process on a 2-core machine, taken from
    batch's workers and verify's sweep threads)."""
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    try:
        main(prog_name="hosttool")
    except SystemExit as exc:
        if _EXIT["quick"] and isinstance(exc.code, int):
            quick_exit(exc.code)
        raise
    if _EXIT["quick"]:
        quick_exit(0)


if __name__ == "__main__":  # pragma: no cover
    run()

