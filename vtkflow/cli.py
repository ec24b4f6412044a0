"""The command line: one small function per subcommand that parses, calls the library and prints.

Errors the user can fix (:class:`~vtkflow.errors.VtkflowError`) print one line and exit with code 2;
``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import json
import sys
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator, List, Optional

import typer

from .errors import VtkflowError

__all__ = ["app", "main"]

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="Time-accurate flow lines from transient CFD series: recipe in, VTK PolyData and images out.",
)
_state = {"debug": False}


@app.callback()
def _options(debug: bool = typer.Option(False, "--debug", help="Show tracebacks for errors.")) -> None:
    _state["debug"] = debug


@contextmanager
def _errors() -> Iterator[None]:
    try:
        yield
    except VtkflowError as exc:
        if _state["debug"]:
            raise
        typer.echo(f"vtkflow: error: {exc}", err=True)
        raise typer.Exit(2) from None
    except KeyboardInterrupt:
        typer.echo("vtkflow: interrupted", err=True)
        raise typer.Exit(130) from None


def _console():  # rich is imported only by the commands that print tables or bars
    from rich.console import Console

    return Console(stderr=False, highlight=False, markup=False, soft_wrap=True)


@app.command()
def run(
    recipe: Path = typer.Argument(..., help="Recipe file (YAML)."),
    output: Optional[Path] = typer.Option(
        None, "--output", "-o", help="Output folder, relative to the working folder (default: the recipe's 'output')."
    ),
    no_render: bool = typer.Option(False, "--no-render", help="Skip the 'renders' section."),
    workers: int = typer.Option(0, "--workers", "-j", min=0,
                                help="Processes that render frames (0: one per CPU, at most 4)."),
    render_only: bool = typer.Option(False, "--render-only",
                                     help="Only render, from the frames and manifest of an earlier run."),
) -> None:
    """Compute every line entry of RECIPE and write VTP frames, images and manifest.json."""
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    from .recipe import load_recipe
    from .run import run_recipe

    with _errors():
        loaded = load_recipe(recipe)
        out = output.resolve() if output is not None else None
        interactive = sys.stderr.isatty()
        bar = Progress(
            TextColumn("{task.description:<22}"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
            disable=not interactive,
        )
        tasks: dict[str, int] = {}
        reported: dict[str, int] = {}

        def progress(what: str, done: int, total: int) -> None:
            stage = "renders" if what in loaded.recipe.renders else "frames"
            if interactive:
                if stage not in tasks:
                    tasks[stage] = bar.add_task(stage, total=total)
                bar.update(tasks[stage], completed=done, description=f"{stage}: {what}")
            elif done * 10 // total > reported.get(stage, 0) or done == total:
                # logs of batch jobs: one line per tenth of the work
                reported[stage] = done * 10 // total
                typer.echo(f"{stage} {done}/{total} ({what})")

        with bar:
            if render_only:
                from .run import render_recipe

                manifest = render_recipe(loaded, out, progress=progress, workers=workers)
            else:
                manifest = run_recipe(loaded, out, progress=progress, render=not no_render, workers=workers)
        where = manifest["output"]
        for name, entry in manifest["entries"].items():
            c = entry["counts"]
            typer.echo(
                f"{name:<14} {entry['kind']:<11} {len(entry['frames']):4d} frames  released {c['released']}"
                f"  exited {c['exited']}  stopped {c['stopped']}  dropped {c['dropped_at_release']}"
            )
        for name, r in manifest["renders"].items():
            typer.echo(f"{name:<14} {'render':<11} {len(r['frames']):4d} images")
        typer.echo(f"outputs: {where}  (manifest.json; {manifest['elapsed_seconds']:.1f} s)")


@app.command()
def check(recipe: Path = typer.Argument(..., help="Recipe file (YAML).")) -> None:
    """Validate RECIPE and its series without computing; print a summary."""
    import numpy as np

    from .recipe import load_recipe
    from .run import open_series, plan

    with _errors():
        loaded = load_recipe(recipe)
        series = open_series(loaded)
        p = plan(loaded, series)
        con = _console()
        t = series.times
        con.print(f"recipe    {loaded.path}  (sha256 {loaded.sha256[:12]})")
        con.print(f"snapshots {len(series)}  time {t[0]:g} .. {t[-1]:g}"
                  + (f"  step {np.diff(t).min():g} .. {np.diff(t).max():g}" if len(t) > 1 else ""))
        mesh = series.mesh
        types = ", ".join(f"{n} {k}" for k, n in mesh.cell_type_counts().items())
        con.print(f"mesh      {mesh.n_points} points, {mesh.n_cells} cells ({types})")
        for assoc, names in series.arrays.items():
            if names:
                con.print(f"arrays    {assoc}: {', '.join(names)}")
        names = " ".join(series.velocity_names)
        con.print(f"velocity  {names} ({series.association} data)")
        nan_total = 0
        for k in range(len(series)):
            n = series.nan_count(k)
            nan_total += n
            if n:
                con.print(f"NaN       {series.snapshots[k].label}: {n} points with NaN velocity")
        if not nan_total:
            con.print("NaN       none in any snapshot")
        for rname, (pts, inside) in p.releases.items():
            out = int(np.count_nonzero(~inside))
            con.print(f"release   {rname}: {len(pts)} points" + (f", {out} outside the mesh (dropped)" if out else ""))
        for e in p.entries:
            con.print(
                f"line      {e.name}: {e.entry.kind} from {e.entry.release}, window {e.start:g} .. {e.stop:g},"
                f" {len(e.frames)} frames" + (f", {len(e.instants)} release instants" if len(e.instants) else "")
            )
        for v in p.vortices:
            e = v.entry
            con.print(f"vortices  {v.name}: {e.criterion} at {e.level:g} ({e.level_is}), window {v.start:g} .. {v.stop:g},"
                      f" {len(v.snapshots)} frames")
        for name, r in loaded.recipe.renders.items():
            movie = f"; movie {', '.join(r.movie.formats)} at {r.movie.fps:g} fps" if r.movie is not None else ""
            con.print(f"render    {name}: {', '.join(r.lines)} coloured by {r.color_by} {r.range if r.range == 'auto' else list(r.range)}{movie}")
        con.print("ok")


@app.command()
def graphics() -> None:
    """Report which offscreen rendering backend works here (a test render with each); exit 2 if none does."""
    with _errors():
        from .render import BACKENDS, probe_backend_isolated, working_backend

        for name in BACKENDS:
            ok, detail = probe_backend_isolated(name)
            typer.echo(f"{name:8s} {'works' if ok else 'unavailable'}: {detail}")
        typer.echo(f"renders with: {working_backend()}")


@app.command()
def inspect(files: List[Path] = typer.Argument(..., help="Mesh, series or output (.vtp) files.")) -> None:
    """Print time steps, arrays (association, components, ranges), bounds and cell types of FILES."""
    from .series import describe, expand_files, read_file

    with _errors():
        con = _console()
        for f in files:
            for snap in expand_files([str(f)], Path.cwd(), key="FILE"):
                for line in describe(snap, read_file(snap)):
                    con.print(line)


@app.command()
def schema(output: Optional[Path] = typer.Option(None, "--output", "-o", help="Write to this file.")) -> None:
    """Print the JSON Schema of the recipe, for editors."""
    from .output import atomic_path
    from .recipe import json_schema

    text = json.dumps(json_schema(), indent=2) + "\n"
    if output is None:
        typer.echo(text, nl=False)
    else:
        with atomic_path(output) as tmp:
            tmp.write_text(text)


@app.command()
def demo(
    directory: Path = typer.Argument(Path("meshes/wake"), help="Where to write the demo series."),
    force: bool = typer.Option(False, "--force", help="Write it again even if present."),
) -> None:
    """Generate the synthetic demo case (a meandering trailing-vortex pair in a gusting crosswind)."""
    from .demo import main as demo_main

    with _errors():
        demo_main([str(directory)] + (["--force"] if force else []))


def main() -> None:
    """Console-script entry point."""
    app()


if __name__ == "__main__":
    main()
