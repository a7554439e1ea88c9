"""The command line: parse, call one function, print. Errors become one line and exit 2."""

from __future__ import annotations

import functools
import json
import sys
import traceback
from collections.abc import Callable
from pathlib import Path
from typing import Any, TypeVar

import click

from hosttool import __version__
from hosttool.errors import HostToolError

F = TypeVar("F", bound=Callable[..., Any])


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
                traceback.print_exc()
            click.echo(f"hosttool: error: {exc}", err=True)
            sys.exit(2)

    return wrapper  # type: ignore[return-value]


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
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
    from hosttool.budget import budget_text, compute_budget
    from hosttool.spec import load_spec

    budget = compute_budget(load_spec(spec))
    if as_json:
        _emit_json(budget.to_json())
    else:
        click.echo(budget_text(budget, with_warnings=False), nl=False)
    _warn(budget.warnings)


@main.command()
@click.argument("spec", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--json", "as_json", is_flag=True, help="Print the design as one JSON object.")
@guarded
def design(spec: Path, as_json: bool) -> None:
    """Resolve every constant of SPEC with its format, headroom and error bound."""
    from hosttool.design import make_design
    from hosttool.design_out import design_json, design_text
    from hosttool.spec import load_spec

    resolved = make_design(load_spec(spec))
    if as_json:
        _emit_json(design_json(resolved))
    else:
        click.echo(design_text(resolved, with_warnings=False), nl=False)
    _warn(list(resolved.warnings))


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
    from hosttool.verify_run import run_verify

    verification, text = run_verify(spec, calibration=calibration, samples=samples, seed=seed,
                                    engine=engine, as_json=as_json, report=report)
    click.echo(text, nl=False)
    sys.exit(0 if verification.passed else 1)


@main.command()
@click.argument("path", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--example", "example", default="hive_scale", show_default=True,
              help="Which bundled example to start from.")
@click.option("--force", is_flag=True, help="Overwrite PATH if it exists.")
@guarded
def new(path: Path, example: str, force: bool) -> None:
    """Write a commented starter spec to PATH."""
    from hosttool.starter import write_starter

    written = write_starter(path, example, force=force)
    click.echo(f"wrote {written} (from example {example!r}); edit it, then: hosttool check {written}")


@main.command()
@click.argument("folder", required=False, type=click.Path(file_okay=False, path_type=Path))
@click.option("--example", "example", default="hive_scale", show_default=True,
              help="Which bundled example to run.")
@guarded
def demo(folder: Path | None, example: str) -> None:
    """Run the whole flow on a bundled example into FOLDER (default: a new folder here)."""
    from hosttool.demo import run_demo

    for line in run_demo(folder, example):
        click.echo(line)


if __name__ == "__main__":  # pragma: no cover
    main()
