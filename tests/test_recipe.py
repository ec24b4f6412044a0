"""Unit tests of the recipe schema (:func:`vtkflow.recipe.parse_recipe`) and of the release shapes.

Expectations come from the recipe format as specified (the example recipe, the key names, the defaults)
and from the shapes' documented formulas in :mod:`vtkflow.releases` (their docstrings), each computed
here independently; the box shape is specified as a draw of ``numpy.random.default_rng(seed)``.
"""

from __future__ import annotations

import copy
import itertools
import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import yaml
from vtkmodules.util.numpy_support import vtk_to_numpy
from vtkmodules.vtkIOXML import vtkXMLPolyDataReader

from flows import box_mesh, oscillating, with_, write_series
from vtkflow.errors import RecipeError
from vtkflow.lines import LINE_KINDS
from vtkflow.recipe import Recipe, TimesSpec, json_schema, load_recipe, parse_recipe
from vtkflow.releases import (
    SHAPES,
    BoxShape,
    CircleShape,
    LineShape,
    PlaneShape,
    circle_axes,
    release_points,
)
from vtkflow.run import run_recipe

# The example recipe of the format description, with concrete numbers where it shows [..].
EXAMPLE = r"""
vtkflow: 1
data:
  files: "case/*.vtu"
  times: {field: time}
  velocity: U
releases:
  r1: {line: {start: [0.1, -0.5, 0.0], end: [0.1, 0.5, 0.0], count: 20}}
  r2: {points: [[0.2, 0.0, 0.0], [0.4, 0.1, 0.0]]}
  r3: {circle: {center: [0.5, 0.0, 0.0], normal: [1.0, 0.0, 0.0], radius: 0.1, count: 24}}
  r4: {plane: {origin: [0.1, -0.5, -0.2], u: [0.0, 1.0, 0.0], v: [0.0, 0.0, 0.4], counts: [10, 10]}}
  r5: {box: {low: [0.0, -0.5, -0.2], high: [1.0, 0.5, 0.2], count: 500, seed: 1}}
lines:
  paths:  {kind: pathline,   release: r1, start: 0.0, stop: 1.0}
  smoke:  {kind: streakline, release: r1, start: 0.0, stop: 1.0, every: 0.01}
  marks:  {kind: timeline,   release: r1, start: 0.0, stop: 1.0, every: 0.1}
  inst:   {kind: streamline, release: r4, direction: both}
output: out/case
"""

TIMES_FORMS = {
    "field": ({"field": "time"}, TimesSpec(field="time")),
    "list": ([0.0, 0.5, 1.0], [0.0, 0.5, 1.0]),
    "start-step": ({"start": 0.0, "step": 0.01}, TimesSpec(start=0.0, step=0.01)),
    "pattern": ({"pattern": r"step_(\d+)", "scale": 0.001}, TimesSpec(pattern=r"step_(\d+)", scale=0.001)),
}
VELOCITY_FORMS = {"name": "U", "components": ["u", "v", "w"]}
FILES_FORMS = {"glob": "case/*.vtu", "list": ["case/a.vtu", "case/b.vtu"]}


def example() -> dict[str, Any]:
    return yaml.safe_load(EXAMPLE)



def without(recipe: dict[str, Any], dotted: str) -> dict[str, Any]:
    out = copy.deepcopy(recipe)
    *parents, last = dotted.split(".")
    node = out
    for p in parents:
        node = node[p]
    del node[last]
    return out


def minimal() -> dict[str, Any]:
    return {"vtkflow": 1, "data": {"files": "case/*.vtu", "velocity": "U"}}


# ------------------------------------------------------------------------------------------- examples
@pytest.mark.parametrize(
    "times, velocity, files",
    list(itertools.product(TIMES_FORMS, VELOCITY_FORMS, FILES_FORMS)),
)
def test_example_validates(times: str, velocity: str, files: str) -> None:
    data = example()
    data["data"] = {"files": FILES_FORMS[files], "times": TIMES_FORMS[times][0], "velocity": VELOCITY_FORMS[velocity]}
    r = parse_recipe(data)
    assert isinstance(r, Recipe)
    assert r.data.times == TIMES_FORMS[times][1]
    assert list(np.atleast_1d(r.data.velocity)) == list(np.atleast_1d(VELOCITY_FORMS[velocity]))
    assert r.data.files == FILES_FORMS[files]
    assert {n: rel.shape for n, rel in r.releases.items()} == {
        "r1": "line", "r2": "points", "r3": "circle", "r4": "plane", "r5": "box"
    }
    assert {n: e.kind for n, e in r.lines.items()} == {
        "paths": "pathline", "smoke": "streakline", "marks": "timeline", "inst": "streamline"
    }
    assert r.lines["smoke"].every == 0.01 and r.lines["marks"].every == 0.1
    assert r.lines["inst"].direction == "both"
    assert r.output == "out/case"


def test_example_file_loads(tmp_path: Path) -> None:
    path = tmp_path / "recipe.yaml"
    path.write_text(EXAMPLE)
    loaded = load_recipe(path)
    assert loaded.recipe == parse_recipe(example())
    assert loaded.base == tmp_path.resolve()
    assert len(loaded.sha256) == 64


def test_every_line_kind_is_accepted() -> None:
    assert set(LINE_KINDS) == {"pathline", "streakline", "timeline", "streamline"}
    for kind in LINE_KINDS:
        entry = {"kind": kind, "release": "r1"}
        if LINE_KINDS[kind].needs_every:
            entry["every"] = 0.1
        assert parse_recipe(with_(example(), "lines.x", entry)).lines["x"].kind == kind


# ------------------------------------------------------------------------------------------- defaults
def test_defaults() -> None:
    r = parse_recipe(minimal())
    assert r.data.times == TimesSpec(field="time")
    assert (r.data.times.field, r.data.times.pattern, r.data.times.start, r.data.times.step) == ("time", None, None, None)
    assert r.data.times.scale == 1.0
    assert r.releases == {} and r.lines == {} and r.renders == {}
    assert r.output == "out"


def test_line_entry_defaults() -> None:
    e = parse_recipe(example()).lines["paths"]
    assert e.step == 0.25
    assert e.every is None and e.direction is None and e.frames is None and e.length is None
    bare = parse_recipe(with_(example(), "lines.inst", {"kind": "streamline", "release": "r4"})).lines["inst"]
    assert bare.direction is None and bare.start is None and bare.stop is None and bare.step == 0.25


@pytest.fixture(scope="module")
def small_case(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("recipe_case")
    write_series(box_mesh((0, -1, -0.5), (2, 1, 0.5), (8, 4, 2), "tetra"), oscillating(1.0, 0.5, 3.0), [0.0, 0.1], folder / "case")
    return folder


def _streamline_frame(folder: Path, direction: str | None) -> dict[str, np.ndarray]:
    entry: dict[str, Any] = {"kind": "streamline", "release": "seeds"}
    if direction is not None:
        entry["direction"] = direction
    recipe = {
        "vtkflow": 1,
        "data": {"files": "case/*.vtu", "velocity": "U"},
        "releases": {"seeds": {"points": [[1.0, 0.0, 0.0], [1.0, 0.5, 0.1]]}},
        "lines": {"s": entry},
    }
    name = f"recipe_{direction}.yaml"
    (folder / name).write_text(yaml.safe_dump(recipe))
    out = folder / f"out_{direction}"
    warnings: list[str] = []
    manifest = run_recipe(load_recipe(folder / name), out, warn=warnings.append, render=False)
    assert not warnings
    reader = vtkXMLPolyDataReader()
    reader.SetFileName(str(out / manifest["entries"]["s"]["frames"][0]["file"]))
    reader.Update()
    pd = reader.GetOutput()
    return {
        "points": vtk_to_numpy(pd.GetPoints().GetData()).copy(),
        "arc_length": vtk_to_numpy(pd.GetPointData().GetArray("arc_length")).copy(),
    }


def test_direction_none_runs_forward(small_case: Path) -> None:
    default = _streamline_frame(small_case, None)
    forward = _streamline_frame(small_case, "forward")
    backward = _streamline_frame(small_case, "backward")
    np.testing.assert_array_equal(default["points"], forward["points"])
    np.testing.assert_array_equal(default["arc_length"], forward["arc_length"])
    # forward follows u = (1, 0, 0) at t = 0 downstream (+x); backward goes upstream
    assert default["arc_length"].min() == 0.0 and default["arc_length"].max() > 0.5
    assert backward["arc_length"].max() == 0.0 and backward["arc_length"].min() < -0.5
    assert default["points"][:, 0].max() > 1.5 and backward["points"][:, 0].min() < 0.5


# --------------------------------------------------------------------------------------- schema errors
@pytest.mark.parametrize(
    "dotted, value, needles",
    [
        # times: exactly one source
        ("data.times", {"field": "time", "pattern": r"s_(\d+)"}, ["data.times", "exactly one"]),
        ("data.times", {"start": 0.0}, ["data.times", "'start' and 'step' go together"]),
        ("data.times", {"field": "time", "scale": 2.0}, ["data.times", "'scale' applies to 'pattern' only"]),
        ("data.times", {"pattern": "step_"}, ["data.times", "needs a group"]),
        ("data.times", {"pattern": "step_(\\d+"}, ["data.times", "not a valid regular expression"]),
        ("data.times", {"start": 0.0, "step": 0.0}, ["data.times.step"]),
        ("data.files", [], ["data.files", "empty"]),
        # releases
        ("releases.r1", {}, ["releases.r1", "exactly one release shape", "line, points, circle, plane, box"]),
        ("releases.r1", {"line": {"start": [0, 0, 0], "end": [1, 0, 0], "count": 2}, "points": [[0, 0, 0]]},
         ["releases.r1", "exactly one release shape"]),
        ("releases.r1.line.count", 0, ["releases.r1.line.count"]),
        ("releases.r2.points", [], ["releases.r2.points"]),
        ("releases.r3.circle.radius", -0.1, ["releases.r3.circle.radius"]),
        ("releases.r3.circle.normal", [0, 0, 0], ["releases.r3.circle", "normal"]),
        ("releases.r4.plane.counts", [10, 0], ["releases.r4.plane.counts"]),
        ("releases.r5.box.high", [-1.0, 0.5, 0.2], ["releases.r5.box", "low must not exceed high"]),
        ("releases.r1.lin", {"start": [0, 0, 0]}, ["releases.r1", "unknown key 'lin'", "did you mean 'line'?"]),
        # lines
        ("lines.smoke.every", None, ["lines.smoke", "streakline needs 'every'"]),
        ("lines.marks.every", None, ["lines.marks", "timeline needs 'every'"]),
        ("lines.paths.direction", "both", ["lines.paths", "'direction' applies to streamlines only"]),
        ("lines.inst.every", 0.1, ["lines.inst", "'every' applies to particle lines only"]),
        ("lines.paths.length", 2.0, ["lines.paths", "'length' applies to streamlines only"]),
        ("lines.paths.stop", -1.0, ["lines.paths", "before start"]),
        ("lines.paths.step", 20.0, ["lines.paths.step"]),
        ("lines.paths.step", 0.0, ["lines.paths.step"]),
        ("lines.inst.direction", "sideways", ["lines.inst.direction", "sideways"]),
        ("lines.paths.kind", "streak", ["lines.paths.kind", "'streak'", "pathline, streakline, streamline, timeline"]),
        ("lines.paths.release", "r9", ["lines.paths.release", "'r9'", "did you mean"]),
        ("lines.paths.frames", {"evry": 0.1}, ["lines.paths.frames", "did you mean 'every'?"]),
        ("lines.paths.evry", 0.1, ["lines.paths", "unknown key 'evry'", "did you mean 'every'?"]),
        # top level
        ("vtkflow", 2, ["vtkflow"]),
        ("ouput", "x", ["unknown key 'ouput'", "did you mean 'output'?"]),
    ],
)
def test_schema_errors_name_key(dotted: str, value: Any, needles: list[str]) -> None:
    data = example()
    if value is None:
        data = without(data, dotted)
    else:
        data = with_(data, dotted, value)
    with pytest.raises(RecipeError) as info:
        parse_recipe(data, source="my.yaml")
    message = str(info.value)
    assert message.startswith("my.yaml: ") and "\n" not in message
    for needle in needles:
        assert needle in message, f"{needle!r} not in {message!r}"


@pytest.mark.parametrize("key", ["vtkflow", "data"])
def test_required_top_level_keys(key: str) -> None:
    with pytest.raises(RecipeError, match=f"{key}: missing required key"):
        parse_recipe(without(example(), key))


@pytest.mark.parametrize("key", ["files", "velocity"])
def test_required_data_keys(key: str) -> None:
    with pytest.raises(RecipeError, match=f"data.{key}: missing required key"):
        parse_recipe(without(example(), f"data.{key}"))


@pytest.mark.parametrize("what", ["releases", "lines"])
def test_entry_names_are_checked(what: str) -> None:
    data = example()
    data[what]["bad name"] = data[what]["r1" if what == "releases" else "paths"]
    with pytest.raises(RecipeError, match="'bad name'"):
        parse_recipe(data)


@pytest.mark.parametrize("data", [[1, 2], "vtkflow: 1", None, 3])
def test_top_level_must_be_a_mapping(data: Any) -> None:
    with pytest.raises(RecipeError, match="mapping"):
        parse_recipe(data, source="r.yaml")


def test_models_are_frozen() -> None:
    r = parse_recipe(example())
    with pytest.raises(Exception):
        r.lines["paths"].step = 0.5  # type: ignore[misc]


# ------------------------------------------------------------------------------------ release shapes
def _points_of(data: dict[str, Any], name: str) -> np.ndarray:
    rel = parse_recipe(data).releases[name]
    pts = release_points(rel.shape, rel.spec)
    assert pts.dtype == np.float64 and pts.ndim == 2 and pts.shape[1] == 3
    return pts


@pytest.mark.parametrize("count", [2, 3, 20])
def test_line_points(count: int) -> None:
    start, end = np.array([0.1, -0.5, 0.3]), np.array([1.7, 0.5, -0.2])
    data = with_(example(), "releases.r1.line", {"start": start.tolist(), "end": end.tolist(), "count": count})
    pts = _points_of(data, "r1")
    assert pts.shape == (count, 3)
    expected = np.array([start + k / (count - 1) * (end - start) for k in range(count)])
    np.testing.assert_allclose(pts, expected, rtol=0, atol=1e-15)
    np.testing.assert_allclose(pts[0], start, rtol=0, atol=1e-15)  # both ends included
    np.testing.assert_allclose(pts[-1], end, rtol=0, atol=1e-15)
    steps = np.linalg.norm(np.diff(pts, axis=0), axis=1)  # evenly spaced
    np.testing.assert_allclose(steps, np.linalg.norm(end - start) / (count - 1), rtol=1e-13)


def test_points_are_taken_as_given() -> None:
    given = [[0.2, 0.0, 0.0], [0.4, 0.1, 0.0], [-1.0, 2.0, 3.5]]
    pts = _points_of(with_(example(), "releases.r2.points", given), "r2")
    np.testing.assert_array_equal(pts, np.array(given))


def _documented_e1(normal: np.ndarray) -> np.ndarray:
    """CircleShape's docstring: the unit vector of normal x ez, or of normal x ex if normal is parallel to ez."""
    n = np.asarray(normal, float)
    ez, ex = np.array([0.0, 0.0, 1.0]), np.array([1.0, 0.0, 0.0])
    c = np.array([n[1] * ez[2] - n[2] * ez[1], n[2] * ez[0] - n[0] * ez[2], n[0] * ez[1] - n[1] * ez[0]])
    if np.linalg.norm(c) < 1e-12 * np.linalg.norm(n):
        c = np.array([n[1] * ex[2] - n[2] * ex[1], n[2] * ex[0] - n[0] * ex[2], n[0] * ex[1] - n[1] * ex[0]])
    return c / np.linalg.norm(c)


@pytest.mark.parametrize(
    "normal", [(1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 0.0, 1.0), (0.0, 0.0, -2.0), (1.0, 2.0, 3.0), (-0.3, 0.1, 0.0)]
)
@pytest.mark.parametrize("count", [1, 4, 24])
def test_circle_points(normal: tuple[float, float, float], count: int) -> None:
    center, radius = np.array([0.5, -0.2, 0.1]), 0.3
    spec = {"center": center.tolist(), "normal": list(normal), "radius": radius, "count": count}
    pts = _points_of(with_(example(), "releases.r3.circle", spec), "r3")
    assert pts.shape == (count, 3)
    n = np.asarray(normal) / np.linalg.norm(normal)
    d = pts - center
    np.testing.assert_allclose(np.linalg.norm(d, axis=1), radius, rtol=1e-13)  # at the radius
    np.testing.assert_allclose(d @ n, 0.0, atol=1e-13)  # in the plane normal to `normal`
    e1 = _documented_e1(np.asarray(normal))
    np.testing.assert_allclose(d[0] / radius, e1, atol=1e-13)  # first point along e1
    # evenly spaced, counter-clockwise seen from the tip of the normal: the angle about n from e1 grows by 2 pi / count
    e2 = np.cross(n, e1)
    angle = np.mod(np.arctan2(d @ e2, d @ e1), 2 * np.pi)
    expected = 2 * np.pi * np.arange(count) / count
    np.testing.assert_allclose(np.exp(1j * angle), np.exp(1j * expected), atol=1e-12)
    if count > 2:
        assert np.all(np.cross(d[:-1], d[1:]) @ n > 0)


def test_circle_axes_orthonormal() -> None:
    for normal in [(0, 0, 1), (1, 2, 3), (0, 5, 0)]:
        e1, e2 = circle_axes(normal)
        n = np.asarray(normal, float) / np.linalg.norm(normal)
        basis = np.array([e1, e2, n])
        np.testing.assert_allclose(basis @ basis.T, np.eye(3), atol=1e-14)
        assert np.linalg.det(basis) > 0  # right-handed: e1 x e2 = n


@pytest.mark.parametrize("counts", [(3, 4), (10, 10), (2, 1), (1, 3), (1, 1)])
def test_plane_points(counts: tuple[int, int]) -> None:
    origin, u, v = np.array([0.1, -0.5, -0.2]), np.array([0.0, 1.0, 0.5]), np.array([0.3, 0.0, 0.4])
    spec = {"origin": origin.tolist(), "u": u.tolist(), "v": v.tolist(), "counts": list(counts)}
    pts = _points_of(with_(example(), "releases.r4.plane", spec), "r4")
    nu, nv = counts
    assert pts.shape == (nu * nv, 3)
    for j in range(nv):
        for i in range(nu):  # i runs fastest
            a = i / (nu - 1) if nu > 1 else 0.0  # a count of 1 puts the points at a = 0 (docstring)
            b = j / (nv - 1) if nv > 1 else 0.0
            np.testing.assert_allclose(pts[j * nu + i], origin + a * u + b * v, rtol=0, atol=1e-15)


@pytest.mark.parametrize("seed", [0, 1, 12345])
def test_box_points(seed: int) -> None:
    low, high = [0.0, -0.5, -0.2], [1.0, 0.5, 0.2]
    spec = {"low": low, "high": high, "count": 500, "seed": seed}
    pts = _points_of(with_(example(), "releases.r5.box", spec), "r5")
    np.testing.assert_array_equal(pts, np.random.default_rng(seed).uniform(low, high, (500, 3)))
    assert np.all(pts >= low) and np.all(pts <= high)


def test_box_seed_defaults_to_zero() -> None:
    spec = {"low": [0, 0, 0], "high": [1, 2, 3], "count": 7}
    pts = _points_of(with_(example(), "releases.r5.box", spec), "r5")
    np.testing.assert_array_equal(pts, np.random.default_rng(0).uniform([0, 0, 0], [1, 2, 3], (7, 3)))


def test_release_points_accepts_models_directly() -> None:
    line = LineShape(start=(0, 0, 0), end=(1, 0, 0), count=3)
    np.testing.assert_array_equal(release_points("line", line)[:, 0], [0.0, 0.5, 1.0])
    assert release_points("circle", CircleShape(center=(0, 0, 0), normal=(0, 0, 1), radius=1, count=3)).shape == (3, 3)
    assert release_points("plane", PlaneShape(origin=(0, 0, 0), u=(1, 0, 0), v=(0, 1, 0), counts=(2, 3))).shape == (6, 3)
    assert release_points("box", BoxShape(low=(0, 0, 0), high=(1, 1, 1), count=4)).shape == (4, 3)


def test_release_points_unknown_shape() -> None:
    with pytest.raises(ValueError, match="sphere"):
        release_points("sphere", None)
    assert set(SHAPES) == {"line", "points", "circle", "plane", "box"}


# ---------------------------------------------------------------------------------------- JSON schema
def test_json_schema_structure() -> None:
    schema = json_schema()
    json.dumps(schema)  # plain JSON
    assert {"vtkflow", "data", "releases", "lines", "output"} <= set(schema["properties"])
    assert set(schema["required"]) == {"vtkflow", "data"}
    assert schema["$schema"].endswith("2020-12/schema")
    assert schema["$defs"]["LineEntry"]["properties"]["step"]["default"] == 0.25
    assert set(schema["$defs"]["Release"]["properties"]) == set(SHAPES)


def test_json_schema_lists_line_kinds() -> None:
    kind = json_schema()["$defs"]["LineEntry"]["properties"]["kind"]
    assert set(kind.get("enum", [])) == set(LINE_KINDS)


def _validator():
    jsonschema = pytest.importorskip("jsonschema")
    return jsonschema.Draft202012Validator(json_schema())


@pytest.mark.parametrize("times", list(TIMES_FORMS))
@pytest.mark.parametrize("velocity", list(VELOCITY_FORMS))
def test_json_schema_validates_examples(times: str, velocity: str) -> None:
    validator = _validator()
    data = example()
    data["data"]["times"] = TIMES_FORMS[times][0]
    data["data"]["velocity"] = VELOCITY_FORMS[velocity]
    errors = list(validator.iter_errors(data))
    assert not errors, [e.message for e in errors]


def test_json_schema_rejects_unknown_key() -> None:
    validator = _validator()
    assert list(validator.iter_errors(with_(example(), "lines.paths.evry", 0.1)))
    assert list(validator.iter_errors(with_(example(), "ouput", "x")))
