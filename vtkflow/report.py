"""The run report: ``<output>/report.html``, one self-contained page that opens from the file system.

It shows the recipe, a summary of the manifest (particles released, exited and stopped per line entry;
criterion and levels per vortex entry), plots of the per-frame figures over time (matplotlib, written as
PNG under ``<output>/report/``), a contact sheet of each render's frames and its movies. Every link is
relative to the output folder. Written atomically; matplotlib is imported only here.
"""

from __future__ import annotations

import csv
import html
from pathlib import Path
from typing import Any

from .output import atomic_path

__all__ = ["write_report", "CONTACT_FRAMES"]

#: Most frames of a render shown on the contact sheet (evenly spaced, first and last included).
CONTACT_FRAMES = 12


def _table(header: list[str], rows: list[list[str]]) -> str:
    """An HTML table; cells are given escaped (they may hold links)."""
    head = "".join(f"<th>{html.escape(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in row) + "</tr>" for row in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


def _figure(out: Path, name: str, times: list[float], series: dict[str, list[float]], title: str) -> str:
    """Plot ``series`` over ``times`` into ``<out>/report/<name>.png``; the HTML that shows it."""
    png = _plot(out / "report" / f"{name}.png", times, series, title)
    return f"<figure><img src='{html.escape(png.relative_to(out).as_posix())}' alt='{html.escape(name)}'></figure>"


def _plot(path: Path, times: list[float], series: dict[str, list[float]], title: str) -> Path:
    import matplotlib

    matplotlib.use("Agg")  # no display
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(len(series), 1, figsize=(7.0, 1.8 * len(series) + 0.6), sharex=True, squeeze=False)
    for ax, (name, values) in zip(axes[:, 0], series.items()):
        ax.plot(times, values, marker=".", lw=1.2)
        ax.set_ylabel(name)
        ax.grid(alpha=0.3)
    axes[-1, 0].set_xlabel("time")
    axes[0, 0].set_title(title)
    fig.tight_layout()
    with atomic_path(path, keep_suffix=True) as tmp:
        fig.savefig(tmp, dpi=90, format="png")
    plt.close(fig)
    return path


def _vertex_counts(out: Path, frames: list[dict[str, Any]]) -> list[float]:
    """Vertices per frame: from the manifest (written with each frame), else from the frame file."""
    from .output import read_vtp

    return [float(f["points"]) if "points" in f else float(read_vtp(out / f["file"]).GetNumberOfPoints())
            for f in frames]


def write_report(out: Path, manifest: dict[str, Any], recipe_text: str) -> Path:
    """Write ``report.html`` (and its plots) into the output folder ``out``; returns its path."""
    out = Path(out)
    esc = html.escape
    parts = [
        "<!DOCTYPE html><html><head><meta charset='utf-8'><title>vtkflow run report</title><style>",
        "body{font-family:sans-serif;margin:2em;max-width:1200px} table{border-collapse:collapse}"
        " td,th{border:1px solid #ccc;padding:3px 8px;text-align:right} th{background:#f3f3f3}"
        " td:first-child,th:first-child{text-align:left} .sheet img{width:280px;margin:2px}"
        " pre{background:#f7f7f7;padding:1em;overflow:auto} figure{display:inline-block;margin:4px}",
        "</style></head><body>",
        "<h1>vtkflow run report</h1>",
        f"<p>vtkflow {esc(str(manifest.get('vtkflow_version')))}; recipe {esc(str(manifest.get('recipe')))}"
        f" (sha256 {esc(str(manifest.get('recipe_sha256', ''))[:12])}); {manifest['series']['snapshots']} snapshots,"
        f" time {manifest['series']['time_range'][0]:g} to {manifest['series']['time_range'][1]:g}; mesh"
        f" {manifest['series']['mesh']['points']} points, {manifest['series']['mesh']['cells']} cells.</p>",
        "<p><em>Pictures help to understand a flow; they do not validate a design. Results are only as good as the"
        " simulation and its saved time resolution.</em></p>",
    ]
    entries = manifest.get("entries", {})
    if entries:
        rows = [[esc(name), esc(e["kind"]), str(len(e["frames"]))]
                + [str(e["counts"][k]) for k in ("released", "exited", "stopped", "dropped_at_release")]
                for name, e in entries.items()]
        parts.append("<h2>Line entries</h2>" + _table(
            ["entry", "kind", "frames", "released", "exited", "stopped", "dropped at release"], rows))
        parts += [_figure(out, name, [f["time"] for f in e["frames"]], {"vertices": _vertex_counts(out, e["frames"])},
                          f"{name}: vertices per frame") for name, e in entries.items() if e["frames"]]
    vortices = manifest.get("vortices", {})
    if vortices:
        rows = [[esc(name), esc(v["criterion"]), f"{v['level']:g} ({esc(v['level_is'])})",
                 f"{v['levels_used'][0]:.6g}, {v['levels_used'][-1]:.6g}", str(len(v["frames"])),
                 f"<a href='{esc(v['table'])}'>frames</a>, <a href='{esc(v['core_table'])}'>cores</a>"]
                for name, v in vortices.items()]
        parts.append("<h2>Vortex entries</h2>" + _table(
            ["entry", "criterion", "level", "level used (first, last frame)", "frames", "tables"], rows))
        for name, v in vortices.items():
            with open(out / v["table"], newline="") as fh:
                table = list(csv.DictReader(fh))
            if table:
                cols = ("cores", "core_length", "volume", "peak", "max_strength")
                parts.append(_figure(out, name, [float(r["time"]) for r in table],
                                     {c: [float(r[c]) for r in table] for c in cols}, f"{name}: per-frame figures"))
    renders = manifest.get("renders", {})
    if renders:
        parts.append("<h2>Renders</h2>")
        for name, r in renders.items():
            rng = r.get("range")
            parts.append(f"<h3>{esc(name)}</h3><p>{len(r['frames'])} frames of {esc(', '.join(r['lines']))}"
                         + (f"; colour range {rng[0]:.6g} to {rng[1]:.6g}" if rng else "") + "</p>")
            for fmt, movie in r.get("movies", {}).items():
                link = esc(movie)
                if fmt == "mp4":
                    parts.append(f"<p><video controls width='640' src='{link}'></video><br><a href='{link}'>{link}</a></p>")
                else:
                    parts.append(f"<p><a href='{link}'>{link}</a></p>")
            frames = r["frames"]
            n = len(frames)
            pick = sorted({round(i * (n - 1) / max(1, CONTACT_FRAMES - 1)) for i in range(min(n, CONTACT_FRAMES))})
            parts.append("<div class='sheet'>")
            for i in pick:
                f = frames[i]
                link = esc(f["file"])
                parts.append(f"<a href='{link}'><img src='{link}' alt='t = {f['time']:g}' title='t = {f['time']:g}'></a>")
            parts.append("</div>")
    parts.append(f"<h2>Recipe</h2><pre>{esc(recipe_text)}</pre></body></html>")
    path = out / "report.html"
    with atomic_path(path) as tmp:
        tmp.write_text("\n".join(parts), encoding="utf-8")
    return path
