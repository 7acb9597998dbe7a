"""The ``lakeloss`` command line: parse, build the config, make one call, report.

Every :class:`~lakeloss.errors.LakelossError` becomes one line ``error: ...`` on stderr and
exit code 2 (1 for anything unexpected); a traceback is shown only with ``-v``.
"""

from __future__ import annotations

import functools
import logging
import os
import sys
import warnings
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import click

from lakeloss.errors import LakelossError, LakelossWarning
from lakeloss.progress import ProgressBar, ProgressFactory

if TYPE_CHECKING:
    from lakeloss.config import RunConfig

EXIT_USER_ERROR = 2
EXIT_UNEXPECTED = 1
EXIT_NO_TOTAL = 3
"""Outputs written, but no water body has a whole-run total (gaps in every body's climate)."""


# Libraries that log progress at INFO (a dask cluster prints some 30 lines starting up);
# kept at WARNING unless -v. Worker processes read the environment variable.
_LIBRARY_LOGGERS = ("distributed", "dask", "tornado", "asyncio", "bokeh", "rasterio", "pyogrio")
_DASK_LOGGING = "DASK_LOGGING__DISTRIBUTED"


def _configure_logging(verbose: int, quiet: bool) -> None:
    level = (
        logging.WARNING
        if quiet
        else (logging.DEBUG if verbose > 1 else logging.INFO if verbose else logging.WARNING)
    )
    logging.basicConfig(level=level, stream=sys.stderr, format="%(levelname)s: %(message)s")
    if level > logging.INFO:
        os.environ.setdefault(_DASK_LOGGING, "warning")  # read by dask in every worker
        if "dask" in sys.modules:  # already imported: its configuration was read
            import dask

            dask.config.set({"logging.distributed": os.environ[_DASK_LOGGING]})
        for name in _LIBRARY_LOGGERS:
            logging.getLogger(name).setLevel(logging.WARNING)


def _show_warning(
    message: Warning | str, category: type[Warning], *args: object, **kwargs: object
) -> None:
    if issubclass(category, LakelossWarning):
        click.echo(f"warning: {message}", err=True)
    else:
        logging.getLogger("py.warnings").debug("%s: %s", category.__name__, message)


def _guarded(func: Callable[..., Any]) -> Callable[..., Any]:
    """Turn lakeloss errors into one-line messages; tracebacks only with -v."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        verbose = kwargs.get("verbose", 0)
        _configure_logging(verbose, kwargs.get("quiet", False))
        warnings.showwarning = _show_warning
        try:
            return func(*args, **kwargs)
        except LakelossError as err:
            if verbose:
                raise
            click.echo(f"error: {err}", err=True)
            sys.exit(EXIT_USER_ERROR)
        except BrokenPipeError:  # output piped into `head` and closed: not an error
            sys.stderr.close()
            sys.exit(0)
        except KeyboardInterrupt:
            click.echo("error: interrupted; no outputs were written", err=True)
            sys.exit(130)
        except Exception as err:  # noqa: BLE001 - last line of defence for users
            if verbose:
                raise
            click.echo(
                f"error: unexpected {type(err).__name__}: {err} "
                "(rerun with -v for the traceback and report it)",
                err=True,
            )
            sys.exit(EXIT_UNEXPECTED)

    return wrapper


def _verbosity(func: Callable[..., Any]) -> Callable[..., Any]:
    func = click.option("-q", "--quiet", is_flag=True, help="Only errors and warnings.")(func)
    return click.option(
        "-v", "--verbose", count=True, help="More detail on stderr; -v also shows tracebacks."
    )(func)


def _execution(func: Callable[..., Any]) -> Callable[..., Any]:
    func = click.option(
        "--strict/--lenient",
        default=None,
        help="Refuse (default) or only warn about values that contradict their units.",
    )(func)
    func = click.option(
        "--chunk-steps",
        type=click.IntRange(min=1),
        default=None,
        help="Time steps per block (default: sized to memory).",
    )(func)
    func = click.option(
        "--scheduler",
        default=None,
        metavar="ADDRESS",
        help="Address or scheduler file of a running dask.distributed cluster.",
    )(func)
    return click.option(
        "--workers",
        type=click.IntRange(min=1),
        default=None,
        help="Start a local dask.distributed cluster of N worker processes.",
    )(func)


def _progress(quiet: bool) -> ProgressFactory | None:
    if quiet:
        return None
    from tqdm import tqdm

    def factory(total: int, label: str) -> ProgressBar:
        return tqdm(
            total=total, desc=label, unit="step", file=sys.stderr, disable=None, leave=False
        )

    return factory


def _load(
    config_path: str,
    strict: bool | None,
    workers: int | None,
    scheduler: str | None,
    chunk_steps: int | None,
) -> RunConfig:
    from lakeloss.config import load_config

    config = load_config(config_path).with_strict(strict)
    return config.with_overrides(workers=workers, scheduler=scheduler, chunk_steps=chunk_steps)


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="lakeloss")
def cli() -> None:
    """Open-water evaporation for many water bodies from gridded climate.

    Figures are estimates for screening and water accounting, not for design, licensing or
    dam-safety decisions.
    """


@cli.command()
@click.argument("config_path", metavar="CONFIG", type=click.Path())
@click.option("--overwrite", is_flag=True, help="Replace an existing output directory.")
@_execution
@_verbosity
@_guarded
def run(
    config_path: str,
    overwrite: bool,
    workers: int | None,
    scheduler: str | None,
    chunk_steps: int | None,
    strict: bool | None,
    verbose: int,
    quiet: bool,
) -> None:
    """Compute evaporation for every water body and write the outputs."""
    from lakeloss.pipeline import run_to_directory
    from lakeloss.report import flag_notes, no_total_message, summary_line

    config = _load(config_path, strict, workers, scheduler, chunk_steps)
    # The output directory is checked before computing; each partition is written as it
    # is done, and the outputs appear only when the run is complete.
    result = run_to_directory(
        config, config.output.dir, overwrite=overwrite, progress=_progress(quiet)
    )
    target = config.output.dir
    if not quiet:
        for note in flag_notes(result):
            click.echo(f"note: {note}", err=True)
        click.echo(summary_line(result, target))  # the result: stdout; the rest: stderr
    message = no_total_message(result, target)
    if message:
        click.echo(f"error: {message}", err=True)
        sys.exit(EXIT_NO_TOTAL)


@cli.command()
@click.argument("config_path", metavar="CONFIG", type=click.Path())
@click.option("--overwrite", is_flag=True, help="Accept an existing output directory (as run).")
@_execution
@_verbosity
@_guarded
def check(
    config_path: str,
    overwrite: bool,
    workers: int | None,
    scheduler: str | None,
    chunk_steps: int | None,
    strict: bool | None,
    verbose: int,
    quiet: bool,
) -> None:
    """Validate every input and the output directory, and print the plan, without computing."""
    from lakeloss.io.atomic import OutputDirectory
    from lakeloss.plan import make_plan

    config = _load(config_path, strict, workers, scheduler, chunk_steps)
    OutputDirectory(config.output.dir, overwrite=overwrite).check()  # as run refuses it
    plan = make_plan(config)
    click.echo(plan.describe())


@cli.command()
@click.argument("name", required=False)
@_verbosity
@_guarded
def methods(name: str | None, verbose: int, quiet: bool) -> None:
    """List the evaporation methods, or show method NAME in full."""
    from lakeloss.physics import catalogue

    click.echo(catalogue.overview() if name is None else catalogue.describe(name))


@cli.command("draft-config")
@click.argument("layer_path", metavar="LAYER", type=click.Path())
@click.argument("climate_paths", metavar="CLIMATE...", nargs=-1, required=True, type=click.Path())
@click.option(
    "-o",
    "--output",
    "config_path",
    default="lakeloss.toml",
    show_default=True,
    type=click.Path(),
    help="Configuration file to write.",
)
@click.option("--layer", "layer_name", default=None, help="Layer to use if the file has several.")
@click.option("--overwrite", is_flag=True, help="Replace an existing configuration file.")
@_verbosity
@_guarded
def draft_config(
    layer_path: str,
    climate_paths: tuple[str, ...],
    config_path: str,
    layer_name: str | None,
    overwrite: bool,
    verbose: int,
    quiet: bool,
) -> None:
    """Draft a commented configuration from a water-body LAYER and CLIMATE files or folders."""
    from pathlib import Path

    from lakeloss.starter import draft

    result = draft(
        Path(layer_path),
        [Path(p) for p in climate_paths],
        Path(config_path),
        layer=layer_name,
        overwrite=overwrite,
    )
    if not quiet:
        click.echo(
            f"{result.summary()}\nwrote {config_path}; next: lakeloss check {config_path}", err=True
        )


def main() -> None:
    """Console-script entry point."""
    cli(prog_name="lakeloss")


if __name__ == "__main__":
    main()
