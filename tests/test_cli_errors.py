"""The command line on bad input: one ``vtkflow: error:`` line, exit code 2, no traceback unless ``--debug``.

Every case writes a small transient series (a box of 8 x 4 x 2 hexahedra split into tetrahedra, four
snapshots of the oscillating flow of ``tests/flows.py``) and a short recipe, breaks one thing and runs the
CLI in-process with typer's ``CliRunner`` (stderr separate from stdout). Where an expectation is a number
(mesh size, NaN points, dropped points, positions) it comes from the mesh generator or the analytic flow,
not from vtkflow.

Also here: the success paths of ``check``, ``schema`` and ``inspect``, the NaN and outside-release
warnings, and the state of the output folder after a failed run.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import yaml
from typer.testing import CliRunner
from vtkmodules.util.numpy_support import vtk_to_numpy
from vtkmodules.vtkCommonCore import vtkCommand
from vtkmodules.vtkIOXML import vtkXMLPolyDataReader, vtkXMLUnstructuredGridReader, vtkXMLUnstructuredGridWriter

from flows import box_mesh, oscillating, oscillating_position, with_, write_series
from vtkflow import _vtk
from vtkflow.cli import app
from vtkflow.errors import InputError, RecipeError, VtkflowError

# The series every test starts from.
LOW, HIGH, CELLS = (0.0, -1.0, -0.5), (2.0, 1.0, 0.5), (8, 4, 2)
TIMES = [0.0, 0.1, 0.2, 0.3]
U, V, OMEGA = 1.0, 0.5, 3.0
PREFIX = "vtkflow: error: "

runner = CliRunner()


# ---------------------------------------------------------------------------------------------- helpers
@pytest.fixture(scope="module")
def series_src(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("series") / "case"
    write_series(box_mesh(LOW, HIGH, CELLS, "tetra"), oscillating(U, V, OMEGA), TIMES, folder)
    return folder


@pytest.fixture()
def case(tmp_path: Path, series_src: Path) -> Path:
    """A working folder with its own copy of the series under ``case/``."""
    shutil.copytree(series_src, tmp_path / "case")
    return tmp_path


def base_recipe() -> dict[str, Any]:
    """A valid recipe for the series: three release points on a line, one pathline over the whole series."""
    return {
        "vtkflow": 1,
        "data": {"files": "case/*.vtu", "velocity": "U"},
        "releases": {"r1": {"line": {"start": [0.2, -0.5, 0.0], "end": [0.2, 0.5, 0.0], "count": 3}}},
        "lines": {"paths": {"kind": "pathline", "release": "r1", "start": 0.0, "stop": 0.3}},
        "output": "out/case",
    }


def write_recipe(folder: Path, recipe: Any, name: str = "recipe.yaml") -> Path:
    path = folder / name
    path.write_text(recipe if isinstance(recipe, str) else yaml.safe_dump(recipe, sort_keys=False))
    return path


def snap(folder: Path, k: int) -> Path:
    return folder / "case" / f"snap_{k:04d}.vtu"


def invoke(*args: Any, **kwargs: Any):
    return runner.invoke(app, [str(a) for a in args], **kwargs)


def expect_error(args: list[Any], *needles: str, exc: type[BaseException] = VtkflowError) -> str:
    """Run the CLI with ``args`` and check the one-line error contract; return the message.

    With ``--debug`` the same command must let the exception through, carrying the same message.
    """
    result = invoke(*args)
    assert result.exit_code == 2, f"exit {result.exit_code}\nstdout: {result.stdout}\nstderr: {result.stderr}"
    lines = result.stderr.splitlines()
    assert len(lines) == 1, f"expected one stderr line, got {lines!r}"
    line = lines[0]
    assert line.startswith(PREFIX), line
    assert "Traceback" not in result.output
    # stdout holds nothing but progress lines of the frames written before the failure
    assert all(re.match(r"^(frames|renders) \d+/\d+ \(", ln) for ln in result.stdout.splitlines()), result.stdout
    for needle in needles:
        assert needle in line, f"{needle!r} not in {line!r}"
    debug = invoke("--debug", *args)
    assert isinstance(debug.exception, exc), repr(debug.exception)
    assert debug.exit_code not in (0, 2)
    assert str(debug.exception) == line[len(PREFIX):]
    return line


def expect_both(folder: Path, recipe: Any, *needles: str, exc: type[BaseException] = VtkflowError) -> None:
    """The same error from ``run`` and from ``check``."""
    path = write_recipe(folder, recipe)
    expect_error(["run", path], *needles, exc=exc)
    expect_error(["check", path], *needles, exc=exc)



def read_back(path: Path) -> Any:
    """Read a VTP with VTK's XML reader; fail on any error event (truncated or garbled file)."""
    errors: list[str] = []
    reader = vtkXMLPolyDataReader()
    reader.SetFileName(str(path))
    for obj in (reader, reader.GetExecutive()):
        obj.AddObserver(vtkCommand.ErrorEvent, lambda o, e: errors.append(e))
    reader.Update()
    out = reader.GetOutput()
    assert not errors, f"{path}: {errors}"
    assert out.GetNumberOfPoints() > 0 and out.GetNumberOfLines() > 0, path
    return out


def nan_index(polydata: Any) -> int:
    names = polydata.GetFieldData().GetAbstractArray("status_names")
    values = [names.GetValue(i) for i in range(names.GetNumberOfValues())]
    return values.index("nan")


def truncate(path: Path) -> None:
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])


def rewrite_raw_appended(path: Path) -> None:
    """Write ``path`` again as raw (not base64) appended binary without compression."""
    r = vtkXMLUnstructuredGridReader()
    r.SetFileName(str(path))
    r.Update()
    w = vtkXMLUnstructuredGridWriter()
    w.SetFileName(str(path))
    w.SetInputData(r.GetOutput())
    w.SetDataModeToAppended()
    w.EncodeAppendedDataOff()
    w.SetCompressorTypeToNone()
    assert w.Write() == 1
    assert b'encoding="raw"' in path.read_bytes()


# -------------------------------------------------------------------------------------- 1 missing files
def test_missing_recipe_file(tmp_path: Path) -> None:
    missing = tmp_path / "nope.yaml"
    for command in ("run", "check"):
        expect_error([command, missing], str(missing), "cannot read recipe", exc=InputError)


def test_recipe_is_a_directory(tmp_path: Path) -> None:
    folder = tmp_path / "recipe.yaml"
    folder.mkdir()
    expect_error(["run", folder], str(folder), "cannot read recipe", exc=InputError)


def test_missing_data_file_in_list(case: Path) -> None:
    recipe = with_(base_recipe(), "data.files", ["case/snap_0000.vtu", "case/missing.vtu", "case/snap_0002.vtu"])
    expect_both(case, with_(recipe, "data.times", [0.0, 0.1, 0.2]), "missing.vtu", "data.files", exc=InputError)


def test_directory_in_files_list(case: Path) -> None:
    (case / "case" / "sub.vtu").mkdir()
    recipe = with_(base_recipe(), "data.files", ["case/snap_0000.vtu", "case/sub.vtu"])
    expect_both(case, with_(recipe, "data.times", [0.0, 0.1]), "sub.vtu", "data.files", exc=InputError)


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() == 0, reason="root reads files whatever their mode")
def test_unreadable_data_file(case: Path) -> None:
    target = snap(case, 1)
    target.chmod(0)
    try:
        expect_both(case, base_recipe(), str(target), exc=InputError)
    finally:
        target.chmod(0o644)


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() == 0, reason="root reads files whatever their mode")
def test_unreadable_recipe(tmp_path: Path) -> None:
    path = write_recipe(tmp_path, base_recipe())
    path.chmod(0)
    try:
        expect_error(["run", path], str(path), "cannot read recipe", exc=InputError)
    finally:
        path.chmod(0o644)


def test_yaml_syntax_error_names_file_and_line(tmp_path: Path) -> None:
    path = write_recipe(tmp_path, "vtkflow: 1\ndata:\n  files: [a.vtu\n  velocity: U\n")
    line = expect_error(["run", path], str(path), "YAML", exc=RecipeError)
    assert re.search(re.escape(str(path)) + r":\d+: ", line), line


def test_recipe_not_a_mapping(tmp_path: Path) -> None:
    path = write_recipe(tmp_path, "- vtkflow\n- 1\n")
    expect_error(["check", path], str(path), "mapping", exc=RecipeError)


# ------------------------------------------------------------------------------------------ 2 truncated
@pytest.mark.parametrize("which", [0, 2], ids=["first", "later"])
@pytest.mark.parametrize("encoding", ["base64", "raw"])
def test_truncated_vtu_names_the_file(case: Path, which: int, encoding: str) -> None:
    target = snap(case, which)
    if encoding == "raw":
        rewrite_raw_appended(target)
    truncate(target)
    path = write_recipe(case, base_recipe())
    for command in ("run", "check"):
        expect_error([command, path], str(target), "not a readable, complete .vtu", exc=InputError)
    # the same file given to `inspect`
    expect_error(["inspect", target], str(target), exc=InputError)


def test_truncated_vtu_error_detail_is_text(case: Path) -> None:
    truncate(snap(case, 0))
    line = expect_error(["check", write_recipe(case, base_recipe())], exc=InputError)
    detail = re.search(r"\(([^()]*)\)$", line)
    assert detail is not None and re.search(r"[A-Za-z]", detail.group(1)), line


def test_truncated_vtu_real_stderr_is_one_line(case: Path) -> None:
    # In a real process: VTK writes to file descriptor 2 directly, which CliRunner cannot see.
    truncate(snap(case, 0))
    path = write_recipe(case, base_recipe())
    proc = subprocess.run(
        [sys.executable, "-m", "vtkflow.cli", "check", str(path)], capture_output=True, text=True, timeout=120
    )
    assert proc.returncode == 2
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith(PREFIX), lines


def test_real_process_error_is_one_line(case: Path) -> None:
    # The installed entry point in a process of its own (what a user's shell sees), without and with --debug.
    path = write_recipe(case, with_(base_recipe(), "lines.paths.evry", 0.1))
    cmd = [sys.executable, "-m", "vtkflow.cli"]
    proc = subprocess.run([*cmd, "check", str(path)], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2 and proc.stdout == ""
    assert proc.stderr.splitlines() == [f"{PREFIX}{path}: lines.paths: unknown key 'evry'; did you mean 'every'?"]
    debug = subprocess.run([*cmd, "--debug", "check", str(path)], capture_output=True, text=True, timeout=120)
    assert debug.returncode not in (0, 2)
    assert "Traceback" in debug.stderr and "RecipeError" in debug.stderr


# ------------------------------------------------------------------------------------ 3 unknown keys
@pytest.mark.parametrize(
    "dotted, value, where, wrong, right",
    [
        ("ouput", "out", "", "ouput", "output"),
        ("data.velocty", "U", "data", "velocty", "velocity"),
        ("data.times", {"feild": "time"}, "data.times", "feild", "field"),
        ("lines.paths.evry", 0.1, "lines.paths", "evry", "every"),
        ("lines.paths.frames", {"evry": 0.1}, "lines.paths.frames", "evry", "every"),
        ("releases.r1", {"lin": {"start": [0, 0, 0], "end": [1, 0, 0], "count": 2}}, "releases.r1", "lin", "line"),
    ],
    ids=["top", "data", "data.times", "lines.entry", "lines.entry.frames", "releases.entry"],
)
def test_unknown_key_suggests_closest(case: Path, dotted: str, value: Any, where: str, wrong: str, right: str) -> None:
    path = write_recipe(case, with_(base_recipe(), dotted, value))
    needles = [str(path), f"unknown key {wrong!r}", f"did you mean {right!r}?"]
    if where:
        needles.append(f": {where}: ")
    for command in ("run", "check"):
        expect_error([command, path], *needles, exc=RecipeError)


@pytest.mark.parametrize(
    "shape, spec, wrong, right",
    [
        ("line", {"start": [0.2, -0.5, 0], "end": [0.2, 0.5, 0], "cont": 3}, "cont", "count"),
        ("circle", {"center": [1, 0, 0], "normal": [1, 0, 0], "radus": 0.2, "count": 4}, "radus", "radius"),
    ],
)
def test_unknown_key_in_release_shape_suggests_closest(case: Path, shape: str, spec: dict, wrong: str, right: str) -> None:
    path = write_recipe(case, with_(base_recipe(), "releases.r1", {shape: spec}))
    expect_error(["check", path], f"releases.r1.{shape}", repr(wrong), f"did you mean {right!r}?", exc=RecipeError)


# -------------------------------------------------------------------------------------- 4 wrong types
@pytest.mark.parametrize(
    "dotted, value, expected",
    [
        ("releases.r1.line.count", "abc", "integer"),
        ("lines.paths.start", "x", "number"),
        ("data.files", 3, "string"),
        ("data.velocity", 3, "string"),
        ("data.times", "abc", "list"),
        ("vtkflow", 2, "1"),
    ],
)
def test_wrong_type_names_key_path(case: Path, dotted: str, value: Any, expected: str) -> None:
    path = write_recipe(case, with_(base_recipe(), dotted, value))
    for command in ("run", "check"):
        line = expect_error([command, path], str(path), f": {dotted}: ", exc=RecipeError)
        assert expected in line.split(f": {dotted}: ", 1)[1], line
        assert repr(value) in line, line


def test_short_vector_says_three_coordinates(case: Path) -> None:
    path = write_recipe(case, with_(base_recipe(), "releases.r1.line.start", [0.2, 0.0]))
    line = expect_error(["check", path], "releases.r1.line.start", exc=RecipeError)
    assert "missing required key" not in line and "3" in line.split("releases.r1.line.start", 1)[1], line


# ------------------------------------------------------------------------------------ 5 missing array
def test_missing_velocity_array(case: Path) -> None:
    recipe = with_(base_recipe(), "data.velocity", "Q")
    expect_both(case, recipe, "'Q'", "data.velocity", str(snap(case, 0)), "arrays: U", exc=InputError)


def test_missing_velocity_component_array(case: Path) -> None:
    recipe = with_(base_recipe(), "data.velocity", ["ux", "uy", "uz"])
    expect_both(case, recipe, "'ux'", "data.velocity", str(snap(case, 0)), "arrays: U", exc=InputError)


def test_missing_time_field(case: Path) -> None:
    recipe = with_(base_recipe(), "data.times", {"field": "clock"})
    expect_both(case, recipe, "'clock'", "data.times.field", str(snap(case, 0)), "time", exc=InputError)


# ---------------------------------------------------------------------------------------------- 6 times
@pytest.mark.parametrize(
    "times, what", [([0.0, 0.2, 0.1], "decreasing"), ([0.0, 0.1, 0.1], "duplicate")], ids=["decreasing", "duplicate"]
)
def test_times_must_increase(case: Path, times: list[float], what: str) -> None:
    recipe = with_(base_recipe(), "data.files", [f"case/snap_{k:04d}.vtu" for k in range(3)])
    recipe = with_(recipe, "data.times", times)
    recipe = with_(recipe, "lines.paths.stop", None)
    expect_both(case, recipe, "data.times", what, "snap_0001.vtu", "snap_0002.vtu", "increase", exc=InputError)


def test_times_count_must_match_files(case: Path) -> None:
    recipe = with_(base_recipe(), "data.times", [0.0, 0.1, 0.2])
    expect_both(case, recipe, "data.times", "3 times", "4 snapshots", exc=InputError)


def test_times_pattern_not_matching(case: Path) -> None:
    recipe = with_(base_recipe(), "data.times", {"pattern": r"step_(\d+)"})
    expect_both(case, recipe, "data.times.pattern", "snap_0000.vtu", exc=InputError)


# ------------------------------------------------------------------------------------------ 7 empty glob
def test_empty_glob(case: Path) -> None:
    recipe = with_(base_recipe(), "data.files", "case/*.vtk")
    expect_both(case, recipe, "data.files", "'case/*.vtk'", "matches no file", exc=InputError)


# ------------------------------------------------------------------------------------- 8 unknown release
def test_unknown_release_suggests_close_name(case: Path) -> None:
    recipe = with_(base_recipe(), "lines.paths.release", "r9")
    expect_both(case, recipe, "lines.paths.release", "'r9'", "did you mean 'r1'?", exc=RecipeError)


def test_unknown_release_lists_names(case: Path) -> None:
    recipe = with_(base_recipe(), "releases.seed2", {"points": [[0.5, 0.0, 0.0]]})
    recipe = with_(recipe, "lines.paths.release", "zzz")
    expect_both(case, recipe, "lines.paths.release", "'zzz'", "r1", "seed2", exc=RecipeError)


# ------------------------------------------------------------------------------------------- 9 windows
@pytest.mark.parametrize("key, value", [("stop", 99.0), ("start", -1.0)])
def test_window_outside_snapshot_times(case: Path, key: str, value: float) -> None:
    recipe = with_(base_recipe(), f"lines.paths.{key}", value)
    if key == "stop":
        recipe = with_(recipe, "lines.paths.start", None)
    else:
        recipe = with_(recipe, "lines.paths.stop", None)
    expect_both(case, recipe, f"lines.paths.{key}", f"{value:g}", "outside the snapshot times", "[0, 0.3]", exc=RecipeError)


def test_missing_render_context_file(case: Path) -> None:
    recipe = with_(base_recipe(), "renders", {"view": {"lines": ["paths"], "range": [0, 2], "context": ["wing.vtp"]}})
    expect_both(case, recipe, "wing.vtp", "no such file", "renders.view.context.0", exc=InputError)


def test_stop_before_start(case: Path) -> None:
    recipe = with_(with_(base_recipe(), "lines.paths.start", 0.2), "lines.paths.stop", 0.1)
    expect_both(case, recipe, "lines.paths", "before start", exc=RecipeError)


# ---------------------------------------------------------------------------------------- 10 line kind
def test_unknown_line_kind_lists_kinds(case: Path) -> None:
    recipe = with_(base_recipe(), "lines.paths.kind", "streak")
    expect_both(
        case, recipe, "lines.paths.kind", "'streak'", "pathline", "streakline", "timeline", "streamline", exc=RecipeError
    )


# ------------------------------------------------------------------------------------ bad output folder
def test_output_folder_cannot_be_created(case: Path) -> None:
    (case / "blocker").write_text("a file, not a folder\n")
    path = write_recipe(case, with_(base_recipe(), "output", "blocker/out"))
    expect_error(["run", path], "blocker", exc=VtkflowError)


# ------------------------------------------------------------------------------------ 11 NaN velocities
NAN_Y = 1.0  # every node on the face y = 1 gets a NaN velocity, in every snapshot


def nan_series(folder: Path) -> int:
    """Rewrite the series with NaN velocity on the face y = 1; return the NaN node count per snapshot."""
    mesh = box_mesh(LOW, HIGH, CELLS, "tetra")
    flow = oscillating(U, V, OMEGA)

    def poisoned(x: np.ndarray, t: float) -> np.ndarray:
        u = flow(x, t)
        u[np.isclose(x[:, 1], NAN_Y)] = np.nan
        return u

    write_series(mesh, poisoned, TIMES, folder / "case")
    return int(np.count_nonzero(np.isclose(np.asarray(mesh.points)[:, 1], NAN_Y)))


def nan_recipe() -> dict[str, Any]:
    # A: (0.2, 0.75, 0) lies in the layer of cells 0.5 <= y <= 1 that touch the NaN face: it stops at release.
    # B: (0.2, -0.25, 0) drifts by V/omega (1 - cos(omega t)) <= 0.07 in y by t = 0.3: it stays in the clean
    #    cells -0.5 <= y <= 0 and follows the analytic path.
    recipe = with_(base_recipe(), "releases.r1", {"points": [[0.2, 0.75, 0.0], [0.2, -0.25, 0.0]]})
    return recipe


def test_nan_velocity_stops_particles_and_warns_once(case: Path) -> None:
    per_snapshot = nan_series(case)
    assert per_snapshot == (CELLS[0] + 1) * (CELLS[2] + 1)  # the nodes of one face of the box
    path = write_recipe(case, nan_recipe())
    result = invoke("run", path)
    assert result.exit_code == 0, result.output
    lines = result.stderr.splitlines()
    assert len(lines) == 1, lines
    warning = lines[0]
    assert warning.startswith("vtkflow: warning: ") and "NaN" in warning
    assert re.search(r"\b1 particle", warning), warning
    assert str(snap(case, 0)) in warning and f"({per_snapshot} points)" in warning, warning

    out = case / "out" / "case"
    manifest = json.loads((out / "manifest.json").read_text())
    nan_value = manifest["status_names"].index("nan")
    counts = manifest["entries"]["paths"]["counts"]
    assert counts["stopped_nan"] == 1 and counts["released"] == 2 and counts["dropped_at_release"] == 0

    last = read_back(out / manifest["entries"]["paths"]["frames"][-1]["file"])
    assert nan_index(last) == nan_value
    status = vtk_to_numpy(last.GetPointData().GetArray("status"))
    pid = vtk_to_numpy(last.GetPointData().GetArray("particle_id"))
    pts = vtk_to_numpy(last.GetPoints().GetData())
    assert set(status[pid == 0].tolist()) == {nan_value}
    assert nan_value not in set(status[pid == 1].tolist())
    # Particle B is unaffected by the NaN elsewhere. The flow is uniform in space (linear cells interpolate it
    # exactly) and vtkflow's velocity is linear in time between snapshots (particles.py), so B moves by the
    # trapezoid rule of the sampled velocity; RK4 integrates a velocity linear in t exactly (round-off only).
    end = pts[pid == 1][-1]
    vy = V * np.sin(OMEGA * np.asarray(TIMES))
    expected = [0.2 + U * TIMES[-1], -0.25 + float(np.sum(np.diff(TIMES) * (vy[1:] + vy[:-1]) / 2)), 0.0]
    np.testing.assert_allclose(end, expected, atol=1e-9)
    # and within the time-interpolation error V omega^2 dt^2 / 8 * window of the continuous flow's closed form
    exact = oscillating_position(np.array([0.2, -0.25, 0.0]), np.array(0.0), TIMES[-1], U, V, OMEGA)[0]
    np.testing.assert_allclose(end, exact, atol=V * OMEGA**2 * 0.1**2 / 8 * TIMES[-1])


def test_check_reports_nan_per_snapshot(case: Path) -> None:
    per_snapshot = nan_series(case)
    result = invoke("check", write_recipe(case, nan_recipe()), env={"COLUMNS": "400"})
    assert result.exit_code == 0, result.output
    for k in range(len(TIMES)):
        assert any(
            str(snap(case, k)) in line and f"{per_snapshot} points with NaN" in line for line in result.stdout.splitlines()
        ), result.stdout


# ------------------------------------------------------------------------------ 12 releases outside mesh
def test_release_points_outside_are_dropped(case: Path) -> None:
    recipe = with_(base_recipe(), "releases.r1", {"points": [[0.2, 0.0, 0.0], [5.0, 0.0, 0.0], [0.2, 0.3, 0.0]]})
    path = write_recipe(case, recipe)
    result = invoke("run", path)
    assert result.exit_code == 0, result.output
    lines = result.stderr.splitlines()
    assert len(lines) == 1, lines
    assert lines[0].startswith("vtkflow: warning: ") and "releases.r1" in lines[0] and "1 of 3" in lines[0], lines
    out = case / "out" / "case"
    manifest = json.loads((out / "manifest.json").read_text())
    counts = manifest["entries"]["paths"]["counts"]
    assert counts["dropped_at_release"] == 1 and counts["released"] == 2
    last = read_back(out / manifest["entries"]["paths"]["frames"][-1]["file"])
    ids = set(vtk_to_numpy(last.GetPointData().GetArray("particle_id")).tolist())
    assert ids == {0, 2}  # the second point (outside) never appears
    # `check` says so too, without a warning on stderr
    checked = invoke("check", path, env={"COLUMNS": "400"})
    assert checked.exit_code == 0 and "r1: 3 points, 1 outside the mesh" in checked.stdout, checked.output


def test_streakline_releases_at_every_instant_of_the_window(case: Path) -> None:
    # every = 0.1 over [0, 0.3]: release instants 0, 0.1, 0.2, 0.3 (start + k * every while <= stop), 3 points each
    recipe = with_(base_recipe(), "lines", {"smoke": {"kind": "streakline", "release": "r1", "every": 0.1}})
    result = invoke("run", write_recipe(case, recipe))
    assert result.exit_code == 0, result.output
    out = case / "out" / "case"
    manifest = json.loads((out / "manifest.json").read_text())
    last = read_back(out / manifest["entries"]["smoke"]["frames"][-1]["file"])
    age = vtk_to_numpy(last.GetPointData().GetArray("age"))
    assert np.count_nonzero(age == 0.0) == 3  # the particles released at the frame time itself, as in every other frame
    assert manifest["entries"]["smoke"]["counts"]["released"] == 12


# ------------------------------------------------------------------------------ 13 nothing half-written
def assert_output_clean(out: Path) -> list[Path]:
    files = [p for p in out.rglob("*") if p.is_file()]
    assert not [p for p in files if p.name.endswith(".part")], files
    vtps = [p for p in files if p.suffix == ".vtp"]
    for p in vtps:
        read_back(p)
    return vtps


def test_failure_mid_run_leaves_only_complete_frames(case: Path) -> None:
    # Times given as a list: only the first file is read up front; the truncated third one is met after the
    # frames at t = 0 and 0.1 were written.
    truncate(snap(case, 2))
    recipe = with_(base_recipe(), "data.times", TIMES)
    recipe = with_(recipe, "lines.smoke", {"kind": "streakline", "release": "r1", "every": 0.1})
    path = write_recipe(case, recipe)
    expect_error(["run", path], str(snap(case, 2)), exc=InputError)
    vtps = assert_output_clean(case / "out" / "case")
    assert vtps, "the failure was expected after some frames were written"


class _FailingWriter:
    """Stands in for vtkXMLPolyDataWriter: the third file written comes out half-written and Write() fails."""

    calls = 0

    def __init__(self) -> None:
        self._w = _vtk_writer()
        self._name = ""

    def __getattr__(self, name: str) -> Any:
        return getattr(self._w, name)

    def SetFileName(self, name: str) -> None:
        self._name = name
        self._w.SetFileName(name)

    def Write(self) -> int:
        type(self).calls += 1
        ok = self._w.Write()
        if type(self).calls == 3:
            truncate(Path(self._name))
            return 0
        return ok


_vtk_writer = _vtk.vtkXMLPolyDataWriter


def test_write_failure_leaves_no_partial_file(case: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(_vtk, "vtkXMLPolyDataWriter", _FailingWriter)
    _FailingWriter.calls = 0
    path = write_recipe(case, base_recipe())
    result = invoke("run", path)
    assert result.exit_code != 0
    assert _FailingWriter.calls == 3
    vtps = assert_output_clean(case / "out" / "case")
    assert len(vtps) == 2
    assert not (case / "out" / "case" / "manifest.json").exists()


def test_failed_rerun_leaves_no_stale_manifest(case: Path) -> None:
    recipe = with_(base_recipe(), "data.times", TIMES)
    path = write_recipe(case, recipe)
    assert invoke("run", path).exit_code == 0
    out = case / "out" / "case"
    truncate(snap(case, 2))
    expect_error(["run", path], str(snap(case, 2)), exc=InputError)
    assert_output_clean(out)
    manifest = out / "manifest.json"
    if manifest.exists():
        listed = [f["file"] for e in json.loads(manifest.read_text())["entries"].values() for f in e["frames"]]
        missing = [f for f in listed if not (out / f).is_file()]
        assert not missing, f"manifest.json lists missing frames {missing}"


# ---------------------------------------------------------------------------------- names with brackets
def test_recipe_in_folder_with_brackets(case: Path) -> None:
    folder = case / "w[fine]"
    folder.mkdir()
    shutil.move(str(case / "case"), str(folder / "case"))
    result = invoke("check", write_recipe(folder, base_recipe()))
    assert result.exit_code == 0, result.output


def test_inspect_prints_file_name_with_brackets(case: Path) -> None:
    target = case / "snap[fine].vtu"
    shutil.copy(snap(case, 0), target)
    result = invoke("inspect", target, env={"COLUMNS": "400"})
    assert result.exit_code == 0, result.output
    assert str(target) in result.stdout, result.stdout


# ------------------------------------------------------------------------------------- success paths
def test_check_summary(case: Path) -> None:
    recipe = base_recipe()
    recipe["releases"]["grid"] = {"plane": {"origin": [0.2, -0.5, -0.2], "u": [0, 1, 0], "v": [0, 0, 0.4], "counts": [3, 2]}}
    recipe["lines"]["inst"] = {"kind": "streamline", "release": "grid", "direction": "both"}
    path = write_recipe(case, recipe)
    result = invoke("check", path, env={"COLUMNS": "400"})
    assert result.exit_code == 0, result.output
    assert result.stderr == ""
    text = result.stdout
    mesh = box_mesh(LOW, HIGH, CELLS, "tetra")  # sizes from pyvista's own count of the generated mesh
    expected = [
        f"snapshots {len(TIMES)}  time 0 .. 0.3",
        f"mesh      {mesh.n_points} points, {mesh.n_cells} cells ({mesh.n_cells} tetra)",
        "velocity  U (point data)",
        "NaN       none in any snapshot",
        "release   r1: 3 points",
        "release   grid: 6 points",
        "line      paths: pathline from r1, window 0 .. 0.3, 4 frames",
        "line      inst: streamline from grid, window 0 .. 0.3, 4 frames",
    ]
    for e in expected:
        assert e in text, f"{e!r} not in\n{text}"
    assert text.rstrip().splitlines()[-1] == "ok"


def test_check_lines_not_wrapped_when_piped(case: Path) -> None:
    recipe = with_(base_recipe(), "lines.smoke", {"kind": "streakline", "release": "r1", "every": 0.1})
    result = invoke("check", write_recipe(case, recipe), env={"COLUMNS": None})
    assert result.exit_code == 0, result.output
    assert "line      smoke: streakline from r1, window 0 .. 0.3, 4 frames, 4 release instants" in result.stdout.splitlines()


def test_schema_prints_json() -> None:
    result = invoke("schema")
    assert result.exit_code == 0, result.output
    schema = json.loads(result.stdout)
    assert {"vtkflow", "data", "releases", "lines", "output"} <= set(schema["properties"])


def test_schema_to_file(tmp_path: Path) -> None:
    target = tmp_path / "schema.json"
    result = invoke("schema", "-o", target)
    assert result.exit_code == 0, result.output
    assert json.loads(target.read_text()) == json.loads(invoke("schema").stdout)
    assert [p.name for p in tmp_path.iterdir()] == ["schema.json"]


def test_inspect_prints_times_arrays_bounds_cells(case: Path) -> None:
    k = 1
    result = invoke("inspect", snap(case, k), env={"COLUMNS": "400"})
    assert result.exit_code == 0, result.output
    text = result.stdout
    mesh = box_mesh(LOW, HIGH, CELLS, "tetra")
    assert str(snap(case, k)) in text
    assert "bounds    x 0 .. 2  y -1 .. 1  z -0.5 .. 0.5" in text, text
    assert f"mesh      {mesh.n_points} points, {mesh.n_cells} cells ({mesh.n_cells} tetra)" in text, text
    # U = (1, 0.5 sin(3 t), 0) everywhere: components range 0 .. 1, magnitude sqrt(1 + (0.5 sin 0.3)^2)
    mag = float(np.hypot(U, V * np.sin(OMEGA * TIMES[k])))
    u_line = next(line for line in text.splitlines() if re.match(r"\s*point\s+U\s", line))
    assert "3 comp" in u_line and "0 .. 1" in u_line and f"magnitude {mag:g} .. {mag:g}" in u_line, u_line
    t_line = next(line for line in text.splitlines() if re.match(r"\s*field\s+time\s", line))
    assert f"{TIMES[k]:g} .. {TIMES[k]:g}" in t_line, t_line


def test_inspect_missing_file(tmp_path: Path) -> None:
    missing = tmp_path / "none.vtu"
    expect_error(["inspect", missing], str(missing), exc=InputError)


def test_good_run_writes_frames_and_manifest(case: Path) -> None:
    result = invoke("run", write_recipe(case, base_recipe()))
    assert result.exit_code == 0, result.output
    assert result.stderr == ""
    out = case / "out" / "case"
    manifest = json.loads((out / "manifest.json").read_text())
    frames = manifest["entries"]["paths"]["frames"]
    assert [f["time"] for f in frames] == pytest.approx(TIMES)
    assert len(assert_output_clean(out)) == len(TIMES)
