"""The demo recipe end to end: `vtkflow check`, `vtkflow run`, every output read back, README in step.

The demo case is generated into a temporary folder (about 10 s) and the committed recipe is used as it
is, with only `data.files`, the context surface and `output` pointed there.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
import yaml
from typer.testing import CliRunner
from vtkmodules.vtkIOImage import vtkPNGReader
from vtkmodules.vtkIOXML import vtkXMLPolyDataReader

from vtkflow.cli import app
from vtkflow.demo import generate

ROOT = Path(__file__).resolve().parents[1]
RECIPE = ROOT / "recipes" / "demo.yaml"


@pytest.fixture(scope="module")
def demo_case(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    generate(folder / "meshes" / "wake")
    (folder / "recipes").mkdir()
    recipe = folder / "recipes" / "demo.yaml"
    recipe.write_text(RECIPE.read_text())  # same relative layout as the repository: nothing to rewrite
    return folder, recipe


def test_check_summarises_the_demo(demo_case):
    folder, recipe = demo_case
    result = CliRunner().invoke(app, ["check", str(recipe)], env={"COLUMNS": "200"})
    assert result.exit_code == 0, result.output
    out = result.stdout
    assert "snapshots 41  time 0 .. 4" in out
    assert re.search(r"mesh\s+40425 points, 122880 cells \(73728 tetra, 49152 wedge\)", out)
    assert "U (cell data)" in out
    assert "NaN       none in any snapshot" in out
    assert "release   across: 16 points" in out and "release   grid: 24 points" in out
    assert out.rstrip().endswith("ok")


def test_run_writes_frames_renders_and_manifest(demo_case):
    folder, recipe = demo_case
    result = CliRunner().invoke(app, ["run", str(recipe)])
    assert result.exit_code == 0, result.output
    out = folder / "out" / "demo"
    manifest = json.loads((out / "manifest.json").read_text())
    assert set(manifest["entries"]) == {"paths", "smoke", "smoke_r", "marks", "inst"}
    # default frames: every snapshot time inside the window, both ends included
    assert len(manifest["entries"]["smoke"]["frames"]) == 41
    assert len(manifest["entries"]["inst"]["frames"]) == 9  # frames: {every: 0.5} over [0, 4]
    for name, entry in manifest["entries"].items():
        for k, frame in enumerate(entry["frames"]):
            assert frame["index"] == k and frame["file"] == f"{name}/{name}_{k:04d}.vtp"
            r = vtkXMLPolyDataReader()
            r.SetFileName(str(out / frame["file"]))
            r.Update()
            data = r.GetOutput()
            assert data.GetFieldData().GetArray("time").GetValue(0) == pytest.approx(frame["time"])
            for array in ("velocity", "speed", "status"):
                assert data.GetPointData().GetArray(array) is not None
        assert entry["counts"]["dropped_at_release"] == 0
    assert not list(out.rglob("*.part"))  # nothing half-written
    images = manifest["renders"]["wake"]["frames"]
    assert len(images) == 41
    png = vtkPNGReader()
    png.SetFileName(str(out / images[-1]["file"]))
    png.Update()
    assert png.GetOutput().GetDimensions()[:2] == (1280, 720)
    assert manifest["recipe_sha256"] and manifest["vtkflow_version"]


def test_readme_recipe_is_the_demo_recipe():
    """The walkthrough in README.md shows the committed recipe, key for key."""
    readme = (ROOT / "README.md").read_text()
    block = re.search(r"```yaml\n(.*?)```", readme, re.S).group(1)
    assert yaml.safe_load(block) == yaml.safe_load(RECIPE.read_text())


def test_demo_flow_is_unsteady_enough_for_the_four_kinds_to_differ():
    """The demo flow changes in time at the release line (else streaklines would equal pathlines)."""
    from vtkflow.demo import wake_velocity

    p = np.array([[0.2, 0.47, 0.0], [0.2, -0.41, 0.0]])
    assert np.abs(wake_velocity(p, 0.0) - wake_velocity(p, 1.0)).max() > 1e-2
