"""Movies and parallel rendering of a recipe's frames.

Checks against something outside vtkflow: movie files are read back with imageio (its FFMPEG and pillow
plugins: frame count, size); images rendered in one process and in two spawned worker processes are
compared pixel by pixel (determinism: the same input gives the same PNG).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from flows import box_mesh, oscillating, write_series
from vtkflow.cli import app
from vtkflow.recipe import load_recipe
from vtkflow.run import run_recipe

BODY = """
releases:
  across: {line: {start: [0.1, 0.2, 0.5], end: [0.1, 0.8, 0.5], count: 6}}
lines:
  smoke: {kind: streakline, release: across, every: 0.1}
renders:
  view:
    lines: [smoke]
    color_by: speed
    range: [0.9, 1.1]
    size: [SIZE]
    movie: {formats: [FORMATS], fps: 5}
"""


def _case(tmp_path: Path, size: str = "160, 120", formats: str = "mp4, gif") -> Path:
    if not (tmp_path / "case").is_dir():
        write_series(box_mesh((0, 0, 0), (2, 1, 1), (8, 4, 4)), oscillating(1.0, 0.2, 3.0),
                     np.linspace(0.0, 0.6, 7), tmp_path / "case")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text("vtkflow: 1\ndata: {files: 'case/*.vtu', velocity: U}\noutput: out\n"
                      + BODY.replace("SIZE", size).replace("FORMATS", formats))
    return recipe


def test_movies_read_back_with_the_frames(tmp_path):
    """MP4 and GIF hold every frame at the image size (read back with imageio)."""
    import imageio.v3 as iio

    manifest = run_recipe(load_recipe(_case(tmp_path)), warn=lambda m: None, workers=1)
    out = Path(manifest["output"])
    render = manifest["renders"]["view"]
    assert set(render["movies"]) == {"mp4", "gif"}
    for fmt, name in render["movies"].items():
        frames = iio.imread(out / name, index=None)
        assert frames.shape[:3] == (len(render["frames"]), 120, 160), fmt
    assert not list(out.rglob("*.part*"))


def test_two_workers_draw_the_same_images_as_one(tmp_path):
    """Frames rendered in two spawned processes equal those of one process, pixel for pixel."""
    recipe = _case(tmp_path, formats="gif")
    one = run_recipe(load_recipe(recipe), tmp_path / "one", warn=lambda m: None, workers=1)
    two = run_recipe(load_recipe(recipe), tmp_path / "two", warn=lambda m: None, workers=2)
    import imageio.v3 as iio

    files = [f["file"] for f in one["renders"]["view"]["frames"]]
    assert files == [f["file"] for f in two["renders"]["view"]["frames"]] and len(files) == 7
    for f in files:
        assert np.array_equal(iio.imread(tmp_path / "one" / f), iio.imread(tmp_path / "two" / f)), f


def test_odd_size_mp4_is_a_recipe_error(tmp_path):
    res = CliRunner().invoke(app, ["check", str(_case(tmp_path, size="161, 120", formats="mp4"))])
    assert res.exit_code == 2
    assert "renders.view: an mp4 movie needs an even image width and height" in res.output


def test_missing_encoder_is_caught_by_check(tmp_path, monkeypatch):
    """A missing MP4 encoder is reported by `vtkflow check` (one line, exit 2), before any computing."""
    import vtkflow.movie

    monkeypatch.setattr(vtkflow.movie, "encoder_problem", lambda formats: "no ffmpeg encoder for MP4 (test)")
    res = CliRunner().invoke(app, ["check", str(_case(tmp_path, formats="mp4"))])
    assert res.exit_code == 2
    assert "renders.view.movie: no ffmpeg encoder for MP4 (test)" in res.output
    assert "Traceback" not in res.output


@pytest.mark.parametrize("formats", [["mp4"], ["gif"], ["mp4", "gif"]])
def test_encoder_is_found_here(formats):
    from vtkflow.movie import encoder_problem

    assert encoder_problem(formats) is None


def test_graphics_reports_the_working_backend():
    """`vtkflow graphics` test-renders with each backend (in child processes) and names the one used."""
    res = CliRunner().invoke(app, ["graphics"])
    assert res.exit_code == 0, res.output
    assert "egl      works" in res.output and "renders with: egl" in res.output


def test_no_backend_is_one_line_naming_the_packages(monkeypatch):
    import vtkflow.render as render

    monkeypatch.setattr(render, "_working", None)
    monkeypatch.setattr(render, "vtkEGLRenderWindow", _NoContext)
    monkeypatch.setattr(render, "probe_backend_isolated", lambda name, timeout=60.0: (False, "test"))
    res = CliRunner().invoke(app, ["graphics"])
    assert res.exit_code == 2
    lines = [line for line in res.output.splitlines() if line.startswith("vtkflow: error:")]
    assert len(lines) == 1 and "libegl1 and libgl1-mesa-dri" in lines[0] and "libosmesa6" in lines[0]


class _NoContext:
    """Stands in for the EGL window class on a machine where no OpenGL context can be made."""

    def SetOffScreenRendering(self, on: int) -> None:
        pass

    def SupportsOpenGL(self) -> int:
        return 0


def test_auto_range_is_found_over_all_frames_and_reused(tmp_path):
    """range: auto is the smallest and largest speed over every frame file (read back with pyvista); the
    colour bar is identical in the first and the last image; --render-only reuses the manifest's range."""
    import json

    import imageio.v3 as iio
    import pyvista as pv

    recipe = _case(tmp_path, formats="gif")
    recipe.write_text(recipe.read_text().replace("range: [0.9, 1.1]", "range: auto"))
    manifest = run_recipe(load_recipe(recipe), warn=lambda m: None, workers=1)
    out = Path(manifest["output"])
    speeds = np.concatenate([pv.read(out / f["file"]).point_data["speed"] for f in manifest["entries"]["smoke"]["frames"]])
    assert manifest["renders"]["view"]["range"] == pytest.approx([speeds.min(), speeds.max()], rel=1e-12)
    frames = manifest["renders"]["view"]["frames"]
    first, last = iio.imread(out / frames[0]["file"]), iio.imread(out / frames[-1]["file"])
    legend = slice(int(160 * 0.8), 160)  # the colour bar's column band at the right of a 160-pixel image
    assert np.array_equal(first[:, legend], last[:, legend]) and not np.array_equal(first, last)

    data = json.loads((out / "manifest.json").read_text())
    data["renders"]["view"]["range"] = [0.0, 5.0]
    (out / "manifest.json").write_text(json.dumps(data))
    res = CliRunner().invoke(app, ["run", str(recipe), "--render-only", "--workers", "1"])
    assert res.exit_code == 0, res.output
    assert json.loads((out / "manifest.json").read_text())["renders"]["view"]["range"] == [0.0, 5.0]
    assert not np.array_equal(iio.imread(out / frames[0]["file"]), first)  # drawn with the kept range


def test_render_only_needs_an_earlier_run(tmp_path):
    res = CliRunner().invoke(app, ["run", str(_case(tmp_path)), "--render-only"])
    assert res.exit_code == 2
    assert "manifest.json: no readable manifest of an earlier run to render from" in res.output


def test_report_links_resolve_inside_the_output(tmp_path):
    """report.html: every href and src is a relative path to a file in the output folder (opens from the
    file system, no server); it carries the recipe and the counts."""
    import re
    from html.parser import HTMLParser

    manifest = run_recipe(load_recipe(_case(tmp_path)), warn=lambda m: None, workers=1)
    out = Path(manifest["output"])
    page = (out / manifest["report"]).read_text()

    links: list[str] = []

    class Links(HTMLParser):
        def handle_starttag(self, tag, attrs):
            links.extend(v for k, v in attrs if k in ("href", "src") and v)

    Links().feed(page)
    assert len(links) > 5
    for link in links:
        assert not re.match(r"^[a-z]+:", link) and not link.startswith("/"), link
        target = (out / link).resolve()
        assert target.is_file() and out.resolve() in target.parents, link
    assert "view.mp4" in page and "report/smoke.png" in page
    assert "kind: streakline" in page and "<td>smoke</td><td>streakline</td>" in page


def test_boundary_surface_is_drawn(tmp_path):
    """boundary: true writes the mesh's boundary surface (VTK's geometry filter) once and draws it."""
    import imageio.v3 as iio
    import pyvista as pv

    recipe = _case(tmp_path, formats="gif")
    plain = run_recipe(load_recipe(recipe), tmp_path / "a", warn=lambda m: None, workers=1)
    recipe.write_text(recipe.read_text().replace("    movie:", "    boundary: true\n    boundary_opacity: 0.5\n    movie:"))
    walls = run_recipe(load_recipe(recipe), tmp_path / "b", warn=lambda m: None, workers=1)
    surface = pv.read(tmp_path / "b" / "boundary.vtp")
    assert surface.n_cells == 2 * (8 * 4 + 8 * 4 + 4 * 4) * 2  # the box's outer faces, two triangles per quad
    f = plain["renders"]["view"]["frames"][0]["file"]
    assert walls["renders"]["view"]["frames"][0]["file"] == f
    assert not np.array_equal(iio.imread(tmp_path / "a" / f), iio.imread(tmp_path / "b" / f))


def test_slice_plane_shows_the_field_values(tmp_path):
    """A slice z = 0.2 through a Lamb–Oseen vortex's volume file, seen from +z, coloured by speed over
    [0, 1] with 'greys': at the axis speed 0 takes the map's first colour; at radius 1.5 the colour is that
    of the analytic speed u_theta(1.5) (Lamb 1932), within 0.02 in value (linear interpolation in cells of
    0.2) plus COLOUR rounding."""
    import imageio.v3 as iio

    from flows import lamb_oseen
    from vtkflow.colormaps import sample

    gamma, rc = 2 * np.pi, 1.0
    write_series(box_mesh((-2, -2, 0), (2, 2, 0.4), (20, 20, 2)), lamb_oseen(gamma, rc), [0.0, 1.0], tmp_path / "case")
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(
        "vtkflow: 1\ndata: {files: 'case/*.vtu', velocity: U}\noutput: out\n"
        "vortices:\n  v: {criterion: q, level: 0.3, volume: true, core_lines: null}\n"
        "renders:\n  top:\n    lines: [v]\n    color_by: speed\n    range: [0.0, 1.0]\n    colormap: greys\n"
        "    size: [200, 160]\n    outline: false\n    background: [0.0, 0.3, 0.0]\n"
        "    view: {direction: +z, fit: [[-2, 2], [-2, 2], [0.2, 0.2]]}\n    projection: parallel\n"
        "    styles: {v: {color: [0.0, 0.3, 0.0], opacity: 1.0}}\n"
        "    slice: {entry: v, origin: [0, 0, 0.2], normal: [0, 0, 1]}\n"
    )
    manifest = run_recipe(load_recipe(recipe), warn=lambda m: None, workers=1)
    out = Path(manifest["output"])
    image = iio.imread(out / manifest["renders"]["top"]["frames"][0]["file"]).astype(float)
    from vtkflow.render import AUTO_FILL_HEIGHT, AUTO_FILL_WIDTH, scene_width

    width = 200 * scene_width((200, 160))
    half_h = max(2.0 / AUTO_FILL_HEIGHT, 2.0 / (AUTO_FILL_WIDTH * width / 160))  # the parallel scale
    cx, cy = width / 2.0, 160 / 2.0
    colours = sample("greys", 256) * 255.0

    def pixel(x: float) -> np.ndarray:
        col = int(round(cx + x / half_h * 80.0 - 0.5))
        return image[int(cy), col]

    assert np.abs(pixel(0.0) - colours[0]).max() <= 4.0
    speed = gamma / (2 * np.pi * 1.5) * (1 - np.exp(-(1.5**2) / rc**2))
    near = [colours[int(round(255 * np.clip(v, 0, 1)))] for v in (speed - 0.02, speed + 0.02)]
    got = pixel(1.5)
    assert np.all(got >= np.minimum(*near) - 3.0) and np.all(got <= np.maximum(*near) + 3.0), (got, near)


def test_slice_needs_a_volume_entry(tmp_path):
    recipe = _case(tmp_path, formats="gif")
    recipe.write_text(recipe.read_text().replace("    movie:", "    slice: {entry: smoke, origin: [0, 0, 0], normal: [0, 0, 1]}\n    movie:"))
    res = CliRunner().invoke(app, ["check", str(recipe)])
    assert res.exit_code == 2 and "renders.view.slice.entry: 'smoke' is not a vortex entry with volume: true" in res.output


def test_boundary_region_named_by_the_input(tmp_path):
    """A mesh that carries boundary triangles tagged by a cell array: particles are traced in its
    tetrahedra only (the triangles are left out of the decomposition), and a render draws just the faces
    whose 'region' value is asked for (counted against the faces written)."""
    import imageio.v3 as iio
    import pyvista as pv

    vol = box_mesh((0, 0, 0), (2, 1, 1), (8, 4, 4))
    skin = vol.extract_surface(algorithm="dataset_surface").triangulate()
    centres = skin.cell_centers().points
    inlet = np.isclose(centres[:, 0], 0.0)
    tets = np.asarray(vol.cells_dict[10])
    tris = np.asarray(skin.faces).reshape(-1, 4)[:, 1:]
    # the same points: map the surface's points onto the volume's by position
    index = {tuple(np.round(p, 9)): i for i, p in enumerate(np.asarray(vol.points))}
    tris = np.vectorize(lambda j: index[tuple(np.round(skin.points[j], 9))])(tris)
    mesh = pv.UnstructuredGrid({10: tets, 5: tris}, np.asarray(vol.points))
    region = np.concatenate([np.zeros(len(tets), np.int32), np.where(inlet, 1, 2).astype(np.int32)])
    write_series(mesh, oscillating(1.0, 0.2, 3.0), np.linspace(0.0, 0.6, 7), tmp_path / "case",
                 cell_data={"region": region})
    recipe = _case(tmp_path, formats="gif")
    recipe.write_text(recipe.read_text().replace("    movie:", "    boundary: {array: region, values: [1]}\n"
                                                 "    boundary_opacity: 1.0\n    movie:"))
    manifest = run_recipe(load_recipe(recipe), warn=lambda m: None, workers=1)
    out = Path(manifest["output"])
    faces = pv.read(out / "view" / "boundary.vtp")
    assert faces.n_cells == int(inlet.sum()) and np.allclose(faces.points[:, 0], 0.0)
    assert manifest["entries"]["smoke"]["counts"]["released"] > 0
    assert iio.imread(out / manifest["renders"]["view"]["frames"][0]["file"]).shape == (120, 160, 3)
    recipe.write_text(recipe.read_text().replace("values: [1]", "values: [7]"))
    res = CliRunner().invoke(app, ["run", str(recipe)])
    assert res.exit_code == 2 and "no surface cell has region in [7] (renders.view.boundary)" in res.output
