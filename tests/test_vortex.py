"""Vortex criteria, gradients, isosurfaces and core lines against exact vortices and reference libraries.

Sources beside each check:

* eigenvalues: ``numpy.linalg.eigvalsh`` / ``eigvals`` (LAPACK) as the reference;
* Lamb–Oseen vortex (Lamb 1932, Hydrodynamics, 6th ed., art. 334a; Oseen 1912): u_theta(r) =
  Gamma / (2 pi r) (1 - exp(-r^2 / r_c^2)), r_c^2 = 4 nu t. For a planar swirl u_theta(r) the velocity
  gradient gives Q = u_theta u_theta' / r (derived here: |W|^2 = omega^2 / 2, |S|^2 = 2 S_r_theta^2,
  omega = u' + u / r, S_r_theta = (u' - u / r) / 2), lambda2 = -Q (S^2 + W^2 = -Q in the plane, 0 along
  the axis), and a uniform axial velocity W does not change them; the core line is the axis;
* Taylor–Green vortex (Taylor & Green 1937, Proc. R. Soc. A 158): u = (sin x cos y, -cos x sin y, 0) F(t)
  gives Q = -cos(x + y) cos(x - y) F^2 (derived here from the same definitions);
* linear fields, uniform flow and pure shear: exact by construction (Q = 0 and lambda2 = 0 for a uniform
  flow and for a simple shear, common practice).
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pytest
import pyvista as pv
from scipy.optimize import brentq

from flows import box_mesh, write_series
from vtkflow.criteria import GradientOperator, evaluate, sym_eigvals, volume_inside
from vtkflow.mesh import Mesh

# --------------------------------------------------------------------------------------- helpers
X0, Y0 = 0.0137, 0.0291  # the vortex axis off the mesh lines (a core exactly on edges splits, see README)
GAMMA, AXIAL, NU = 2 * np.pi, 0.3, 0.25


def lamb_oseen(x: np.ndarray, t: float) -> np.ndarray:
    d = x - np.array([X0, Y0, 0.0])
    r2 = d[:, 0] ** 2 + d[:, 1] ** 2
    rc2 = 4 * NU * t
    f = np.where(r2 > 1e-24, GAMMA / (2 * np.pi * np.maximum(r2, 1e-300)) * -np.expm1(-r2 / rc2), GAMMA / (2 * np.pi * rc2))
    return np.stack([-d[:, 1] * f, d[:, 0] * f, np.full(len(x), AXIAL)], axis=1)


def q_lamb_oseen(r: np.ndarray | float, rc: float) -> np.ndarray:
    """Q = u_theta u_theta' / r of the Lamb–Oseen vortex."""
    r = np.asarray(r, dtype=float)
    e = np.exp(-(r**2) / rc**2)
    ut = GAMMA / (2 * np.pi * r) * (1 - e)
    dut = -GAMMA / (2 * np.pi * r**2) * (1 - e) + GAMMA / (np.pi * rc**2) * e
    return ut * dut / r


def fields_of(mesh: Mesh, u: np.ndarray) -> dict[str, np.ndarray]:
    tm = mesh.tetmesh
    op = GradientOperator(mesh.locator, len(tm.points))
    return evaluate(op(tm.extend(u)))


def gradients_of(mesh: Mesh, u: np.ndarray) -> np.ndarray:
    tm = mesh.tetmesh
    return GradientOperator(mesh.locator, len(tm.points))(tm.extend(u))


# ---------------------------------------------------------------------------------- eigenvalues
def test_symmetric_eigenvalues_match_lapack(accuracy):
    """Closed-form eigenvalues (Smith 1961) vs numpy.linalg.eigvalsh: random, double and triple eigenvalues.

    Tolerance: 1e-12 of the largest eigenvalue for distinct ones (round-off); 1e-7 with a double eigenvalue,
    where acos near +-1 turns a round-off of eps in its argument into sqrt(eps) in the angle.
    """
    rng = np.random.default_rng(3)
    a = rng.normal(size=(20000, 3, 3))
    m = a + a.transpose(0, 2, 1)
    err = np.abs(sym_eigvals(m) - np.linalg.eigvalsh(m)).max() / np.abs(m).max()
    accuracy("symmetric eigenvalues vs eigvalsh, random", err, 1e-12)
    assert err < 1e-12
    q, _ = np.linalg.qr(rng.normal(size=(2000, 3, 3)))
    d = np.stack([np.full(2000, 2.0), np.full(2000, 2.0), rng.normal(size=2000)], axis=1)
    double = q @ (d[:, :, None] * np.eye(3)) @ q.transpose(0, 2, 1)
    err2 = np.abs(sym_eigvals(double) - np.linalg.eigvalsh(double)).max()
    accuracy("symmetric eigenvalues vs eigvalsh, a double eigenvalue", err2, 1e-7)
    assert err2 < 1e-7
    triple = q @ (1.5 * np.eye(3)) @ q.transpose(0, 2, 1)
    assert np.abs(sym_eigvals(triple) - 1.5).max() < 1e-12


def test_criteria_match_their_definitions_on_random_gradients():
    """Q, lambda2, swirl and delta from the fused kernel vs NumPy/LAPACK on the definitions (round-off)."""
    rng = np.random.default_rng(4)
    g = rng.normal(size=(20000, 3, 3))
    out = evaluate(g)
    s, w = 0.5 * (g + g.transpose(0, 2, 1)), 0.5 * (g - g.transpose(0, 2, 1))
    np.testing.assert_allclose(out["q"], 0.5 * ((w**2).sum((1, 2)) - (s**2).sum((1, 2))), atol=1e-12)
    np.testing.assert_allclose(out["lambda2"], np.linalg.eigvalsh(s @ s + w @ w)[:, 1], atol=1e-10)
    ev = np.linalg.eigvals(g)
    complex_pair = np.abs(ev.imag).max(axis=1) > 1e-6
    np.testing.assert_allclose(out["swirl"], np.abs(ev.imag).max(axis=1), atol=1e-5)  # Cardano near delta = 0
    assert np.array_equal(out["delta"][np.abs(out["delta"]) > 1e-9] > 0, complex_pair[np.abs(out["delta"]) > 1e-9])
    np.testing.assert_allclose(out["vorticity"], np.stack([g[:, 2, 1] - g[:, 1, 2], g[:, 0, 2] - g[:, 2, 0],
                                                          g[:, 1, 0] - g[:, 0, 1]], axis=1), atol=1e-14)


# ------------------------------------------------------------------------------------- gradients
@pytest.mark.parametrize("kind", ["tetra", "hexahedron"])
def test_linear_fields_have_exact_gradients(kind):
    """u = A x + b: every point gradient equals A to round-off, on tetrahedra and on hexahedra split into 12."""
    mesh = Mesh(box_mesh((0, 0, 0), (1, 2, 1.5), (5, 4, 6), kind))
    a = np.array([[0.3, -1.2, 0.5], [2.0, 0.1, -0.7], [0.4, 0.9, -0.4]])
    grads = gradients_of(mesh, mesh.points @ a.T + np.array([1.0, -2.0, 0.5]))
    assert np.abs(grads - a).max() < 1e-11


def test_uniform_flow_and_pure_shear_give_zero():
    """Q = 0 and lambda2 = 0 for a uniform flow and for u = (gamma y, 0, 0) (round-off of gamma^2)."""
    mesh = Mesh(box_mesh((0, 0, 0), (1, 1, 1), (4, 4, 4)))
    for u in (np.tile([1.0, -2.0, 0.5], (mesh.n_points, 1)), np.stack([3.0 * mesh.points[:, 1], 0 * mesh.points[:, 0],
                                                                       0 * mesh.points[:, 0]], axis=1)):
        out = fields_of(mesh, u)
        assert np.abs(out["q"]).max() < 1e-12 and np.abs(out["lambda2"]).max() < 1e-12
        assert np.abs(out["swirl"]).max() < 1e-6


def test_criteria_are_invariant_under_rigid_rotation():
    """Rotating mesh and field together leaves every scalar criterion unchanged: 1e-9 of its range (round-off),
    1e-7 for lambda2, whose S^2 + W^2 has a double eigenvalue in a planar swirl (see the eigenvalue test)."""
    g = box_mesh((-1, -1, -1), (1, 1, 1), (6, 6, 6))
    mesh = Mesh(g)
    u = lamb_oseen(mesh.points, 1.0)
    c, s = np.cos(0.7), np.sin(0.7)
    rot = np.array([[1, 0, 0], [0, c, -s], [0, s, c]]) @ np.array([[c, 0, s], [0, 1, 0], [-s, 0, c]])
    turned = g.copy()
    turned.points = np.asarray(g.points) @ rot.T
    mesh_r = Mesh(turned)
    one, two = fields_of(mesh, u), fields_of(mesh_r, u @ rot.T)
    for name in ("q", "lambda2", "delta", "swirl", "vorticity_magnitude"):
        scale = np.abs(one[name]).max()
        assert np.abs(one[name] - two[name]).max() <= (1e-7 if name == "lambda2" else 1e-9) * scale, name


def test_gradient_recovery_converges(accuracy):
    """Error of the recovered gradient of a smooth field at interior points, h -> h/2 (uniform tetrahedral
    meshes): the measured order is stated in the criteria module (second order there)."""
    errs = []
    for n in (8, 16):
        mesh = Mesh(box_mesh((0, 0, 0), (1, 1, 1), (n, n, n)))
        x = mesh.points
        u = np.stack([np.sin(2 * x[:, 1]), np.cos(3 * x[:, 2]), np.sin(x[:, 0] + x[:, 1])], axis=1)
        grad = gradients_of(mesh, u)[: mesh.n_points]
        exact = np.zeros((len(x), 3, 3))
        exact[:, 0, 1] = 2 * np.cos(2 * x[:, 1])
        exact[:, 1, 2] = -3 * np.sin(3 * x[:, 2])
        exact[:, 2, 0] = exact[:, 2, 1] = np.cos(x[:, 0] + x[:, 1])
        interior = np.all((x > 0.2) & (x < 0.8), axis=1)
        errs.append(np.abs(grad - exact)[interior].max())
    order = np.log2(errs[0] / errs[1])
    accuracy("gradient recovery, interior order (h 1/8 -> 1/16)", 2.0 - order, 0.3, f"errors {errs[0]:.2e} -> {errs[1]:.2e}")
    assert order > 1.7


def test_volume_inside_is_exact_for_linear_fields():
    """Volume where x + 2y - z > c in the unit cube, against its closed form by sampling-free geometry:
    the linear interpolant is the field itself, so the tetrahedral sum is exact (round-off)."""
    mesh = Mesh(box_mesh((0, 0, 0), (1, 1, 1), (5, 5, 5)))
    tm = mesh.tetmesh
    f = tm.points @ np.array([1.0, 0.0, 0.0])
    for c in (0.1, 0.37, 0.9):
        assert abs(volume_inside(tm.points, mesh.locator.conn, f, c, 1) - (1 - c)) < 1e-12
        assert abs(volume_inside(tm.points, mesh.locator.conn, f, c, -1) - c) < 1e-12
    g = tm.points @ np.array([1.0, 2.0, -1.0])
    ref = np.mean(np.random.default_rng(0).uniform(size=(2_000_000, 3)) @ np.array([1.0, 2.0, -1.0]) > 0.8)
    assert abs(volume_inside(tm.points, mesh.locator.conn, g, 0.8, 1) - ref) < 2e-3  # Monte Carlo: 3 sigma ~ 1e-3


def test_taylor_green_signs_and_zero_crossings():
    """Taylor–Green vortex: sign of Q where |Q_exact| > 5 % of its peak, and Q = 0 on the lines x +- y = pi/2
    within a cell (h = 2 pi / 24)."""
    n = 24
    mesh = Mesh(box_mesh((0, 0, 0), (2 * np.pi, 2 * np.pi, 0.5), (n, n, 2)))
    x = mesh.points
    u = np.stack([np.sin(x[:, 0]) * np.cos(x[:, 1]), -np.cos(x[:, 0]) * np.sin(x[:, 1]), 0 * x[:, 0]], axis=1)
    q = fields_of(mesh, u)["q"][: mesh.n_points]
    exact = -np.cos(x[:, 0] + x[:, 1]) * np.cos(x[:, 0] - x[:, 1])
    clear = np.abs(exact) > 0.05
    assert np.array_equal(np.sign(q[clear]), np.sign(exact[clear]))
    # along the diagonal y = x, Q = -cos(2x): zero at x = pi/4 and 3 pi/4
    h = 2 * np.pi / n
    on = (np.abs(x[:, 0] - x[:, 1]) < 1e-9) & (x[:, 2] == 0.0)
    xs, qs = x[on, 0], q[on]
    order = np.argsort(xs)
    xs, qs = xs[order], qs[order]
    flips = np.flatnonzero(np.sign(qs[1:]) != np.sign(qs[:-1]))
    roots = xs[flips] - qs[flips] * (xs[flips + 1] - xs[flips]) / (qs[flips + 1] - qs[flips])
    expect = np.array([np.pi / 4, 3 * np.pi / 4, 5 * np.pi / 4, 7 * np.pi / 4])
    assert len(roots) == 4 and np.abs(roots - expect).max() < h


# ----------------------------------------------------------------------------- Lamb–Oseen, end to end
RC_TIMES = [1.0, 1.1025, 1.21, 1.3225, 1.44]  # r_c = sqrt(4 nu t) = 1.0, 1.05, 1.1, 1.15, 1.2


@pytest.fixture(scope="module")
def lamb_oseen_run(tmp_path_factory):
    """A Lamb–Oseen series (10 cells per core radius at the first frame) run through a recipe."""
    from vtkflow.recipe import load_recipe
    from vtkflow.run import run_recipe

    folder = tmp_path_factory.mktemp("lamb_oseen")
    write_series(box_mesh((-3, -3, 0), (3, 3, 0.4), (60, 60, 4)), lamb_oseen, RC_TIMES, folder / "case")
    (folder / "recipe.yaml").write_text(
        "vtkflow: 1\ndata: {files: 'case/*.vtu', velocity: U}\noutput: out\n"
        "vortices:\n"
        "  fixed: {criterion: q, level: 0.3}\n"
        "  grow: {criterion: q, level: 0.3, level_is: fraction, volume: true, min_area: 0.01}\n"
        "  l2: {criterion: lambda2, level: -0.3, arrays: [U]}\n"
    )
    manifest = run_recipe(load_recipe(folder / "recipe.yaml"), warn=lambda m: None)
    return manifest, folder / "out"


def _rows(path: Path) -> list[dict[str, float]]:
    with open(path) as fh:
        return [{k: float(v) for k, v in row.items()} for row in csv.DictReader(fh)]


def test_lamb_oseen_isosurface_radius(lamb_oseen_run, accuracy):
    """The Q = 0.3 and lambda2 = -0.3 surfaces at t = 1 lie on the analytic radius within 2 %
    (mean and largest deviation of their points from the axis; Q(r) = u u' / r, lambda2 = -Q)."""
    manifest, out = lamb_oseen_run
    r_exact = brentq(lambda r: q_lamb_oseen(r, 1.0) - 0.3, 0.2, 3.0)
    for entry in ("fixed", "l2"):
        surf = pv.read(out / manifest["vortices"][entry]["frames"][0]["file"])
        r = np.hypot(surf.points[:, 0] - X0, surf.points[:, 1] - Y0)
        err = np.abs(r - r_exact).max() / r_exact
        accuracy(f"Lamb-Oseen {entry} isosurface radius (relative)", err, 0.02, f"r = {r_exact:.4f}, h = 0.1")
        assert err < 0.02
        assert surf.field_data["level"][0] == pytest.approx(0.3 if entry == "fixed" else -0.3)
    surf = pv.read(out / manifest["vortices"]["l2"]["frames"][0]["file"])
    assert {"lambda2", "speed", "vorticity_magnitude", "U"} <= set(surf.point_data.keys())


def test_lamb_oseen_core_line_on_axis(lamb_oseen_run, accuracy):
    """One core line per frame, along the axis within 5 % of the core radius, through the whole height."""
    manifest, out = lamb_oseen_run
    worst = 0.0
    for frame in manifest["vortices"]["grow"]["frames"]:
        lines = pv.read(out / frame["lines"])
        assert lines.n_lines == 1 and frame["cores"] == 1
        worst = max(worst, np.hypot(lines.points[:, 0] - X0, lines.points[:, 1] - Y0).max())
        assert np.ptp(lines.points[:, 2]) == pytest.approx(0.4, abs=1e-6)
        assert "swirl" in lines.point_data.keys()
        assert lines.field_data["level"][0] == pytest.approx(frame["level"])
    accuracy("Lamb-Oseen core line off the axis / r_c", worst / 1.0, 0.05)
    assert worst < 0.05 * 1.0


def test_lamb_oseen_core_growth(lamb_oseen_run, accuracy):
    """With the level a fixed fraction of each frame's peak, the enclosed radius grows like
    r_c = sqrt(4 nu t): radius / r_c constant, equal to the analytic fraction radius, within 2 %."""
    manifest, out = lamb_oseen_run
    rows = _rows(out / manifest["vortices"]["grow"]["table"])
    assert [r["frame"] for r in rows] == list(range(len(RC_TIMES)))
    rc = np.sqrt(4 * NU * np.array([r["time"] for r in rows]))
    radius = np.sqrt(np.array([r["volume"] for r in rows]) / (np.pi * 0.4))
    q0 = 0.25 * (GAMMA / (np.pi * rc[0] ** 2)) ** 2  # Q(0) = omega_0^2 / 4
    rho = brentq(lambda s: q_lamb_oseen(s, 1.0) - 0.3 * q0, 0.05, 3.0)  # in core radii
    err = np.abs(radius / rc - rho).max() / rho
    accuracy("Lamb-Oseen growth: enclosed radius / sqrt(4 nu t)", err, 0.02, f"{len(rows)} frames")
    assert err < 0.02
    levels = manifest["vortices"]["grow"]["levels_used"]
    assert levels == pytest.approx([r["level"] for r in rows]) and levels[0] > levels[-1]
    assert (out / manifest["vortices"]["grow"]["frames"][0]["volume"]).is_file()
    cores = _rows(out / manifest["vortices"]["grow"]["core_table"])
    assert len(cores) == len(RC_TIMES)
    assert max(abs(c["centroid_x"] - X0) for c in cores) < 0.05


def test_vortex_recipe_errors(tmp_path):
    """Bad vortex keys: one line naming the key, exit code 2 (through the CLI)."""
    from typer.testing import CliRunner

    from vtkflow.cli import app

    write_series(box_mesh((0, 0, 0), (1, 1, 1), (3, 3, 3)), lambda x, t: lamb_oseen(x, 1.0), [0.0, 1.0], tmp_path / "case")
    cases = {
        "criterion: vorticity, level: 1": "vortices.v.criterion: unknown criterion 'vorticity'",
        "criterion: q, level: 1, level_is: scaled": "vortices.v: 'reference' goes with level_is: scaled",
        "criterion: q, level: 1, arrays: [p]": "no point or cell array 'p' for vortices.v.arrays",
        "criterion: q, level: 1, start: 5": "vortices.v.start: 5 lies outside the snapshot times",
    }
    for body, message in cases.items():
        recipe = tmp_path / "r.yaml"
        recipe.write_text(f"vtkflow: 1\ndata: {{files: 'case/*.vtu', velocity: U}}\nvortices:\n  v: {{{body}}}\n")
        res = CliRunner().invoke(app, ["check", str(recipe)])
        assert res.exit_code == 2, (body, res.output)
        assert message in res.output and "Traceback" not in res.output


def test_join_gaps_rejoins_a_broken_line_and_keeps_apart_lines_apart():
    """Pieces of one line (some reversed) with gaps of 0.05 rejoin into one ordered line with gap 0.1; a
    parallel line 1.0 away stays separate; with gap 0.01 nothing joins."""
    from vtkflow.criteria import join_gaps

    t = np.linspace(0.0, 3.0, 31)
    line = np.stack([t, 0 * t, 0 * t], axis=1)
    cuts = [(0, 8), (7, 15), (14, 31)]  # each piece starts 0.05 past the previous end
    pieces = [line[a:b] + np.array([0.05 * i, 0, 0]) for i, (a, b) in enumerate(cuts)]
    pieces[1] = pieces[1][::-1]
    other = line[:10] + np.array([0.0, 1.0, 0.0])
    parts = [pieces[2], other, pieces[0], pieces[1]]
    xs = np.concatenate(parts)
    lengths = np.array([len(p) for p in parts])
    strength = xs[:, 0].copy()
    jx, jn, js = join_gaps(xs, lengths, strength, 0.1)
    assert sorted(jn.tolist()) == [10, 33]
    k = int(np.argmax(jn))
    joined = jx[sum(jn[:k]):sum(jn[:k]) + jn[k]]
    assert np.all(np.diff(joined[:, 0]) > 0) or np.all(np.diff(joined[:, 0]) < 0)
    np.testing.assert_array_equal(js, jx[:, 0])  # strengths travel with their vertices
    assert len(join_gaps(xs, lengths, strength, 0.01)[1]) == 4
