"""Offscreen PNG images of flow-line frames: the only vtkflow module that loads OpenGL.

Every other module imports this one lazily, so computing and writing flow lines never loads a
graphics library. Rendering needs no display and no GPU: the render window is VTK's EGL window,
created directly (not through VTK's window factory, which tries an X server first and complains
when there is none), and the system's EGL driver (Mesa's software rasteriser on a bare machine)
draws into an offscreen framebuffer.

A frame shows

* the flow lines of one or more layers (VTP files), unlit, coloured by one point array through the
  render's colour map over its *fixed* range (values outside the range take the end colours, so the
  same colour means the same value in every frame; a vector array is coloured by its magnitude);
* the domain's box outline in grey, and context surfaces in light grey;
* a colour legend titled with the array's name, and the frame's time (the first layer's FieldData
  array ``time``) in the upper-left corner.

:func:`render_frame` keeps its render window between calls with the same render settings, so a
series of frames pays for the window, the context surfaces and the legend once.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Any, Optional, Sequence

import numpy as np

# Rendering modules: imported here and nowhere else in vtkflow. The OpenGL2 and FreeType imports
# register the implementations (mappers, text rendering) behind the abstract rendering classes.
import vtkmodules.vtkRenderingFreeType  # noqa: F401
import vtkmodules.vtkRenderingOpenGL2  # noqa: F401
from vtkmodules.vtkCommonCore import vtkLookupTable
from vtkmodules.vtkFiltersGeometry import vtkGeometryFilter
from vtkmodules.vtkFiltersSources import vtkOutlineSource
from vtkmodules.vtkCommonDataModel import vtkPlane
from vtkmodules.vtkFiltersCore import vtkCutter, vtkTubeFilter
from vtkmodules.vtkIOGeometry import vtkOBJReader, vtkSTLReader
from vtkmodules.vtkIOImage import vtkPNGWriter
from vtkmodules.vtkIOLegacy import vtkDataSetReader
from vtkmodules.vtkIOXML import vtkXMLPolyDataReader, vtkXMLUnstructuredGridReader
from vtkmodules.vtkRenderingAnnotation import vtkScalarBarActor
from vtkmodules.vtkRenderingCore import (
    vtkActor,
    vtkPolyDataMapper,
    vtkRenderer,
    vtkTextActor,
    vtkWindowToImageFilter,
)
from vtkmodules.vtkRenderingOpenGL2 import vtkEGLRenderWindow, vtkOSOpenGLRenderWindow

from .colormaps import sample
from ._vtk import captured_messages
from .errors import InputError, OutputError, VtkflowError
from .output import atomic_path
from .recipe import VIEW_DIRECTIONS, RenderEntry

__all__ = [
    "BACKENDS",
    "probe_backend",
    "probe_backend_isolated",
    "working_backend",
    "render_frame",
    "render_job",
    "worker_setup",
    "FrameRenderer",
    "release_window",
    "format_time",
    "scene_width",
    "TABLE_SIZE",
    "CONTEXT_COLOR",
]

TABLE_SIZE = 256
"""Colours in the lookup table built from the render's colour map."""
AUTO_VIEW_ANGLE = 30.0
"""Without a camera: the vertical view angle in degrees."""
AUTO_FILL_WIDTH = 0.9
AUTO_FILL_HEIGHT = 0.9
"""Without a camera: the box spans at most these fractions of the scene's width and height."""
LEGEND_WIDTH = 0.14
"""The legend takes this fraction of the image's width at the right (more in narrow images, where it
needs room for its labels); the scene takes the rest."""
OUTLINE_COLOR = (0.5, 0.5, 0.5)
CONTEXT_COLOR = (0.82, 0.82, 0.82)
NAN_COLOR = (0.5, 0.5, 0.5)
CONTEXT_SUFFIXES = (".vtp", ".vtu", ".vtk", ".stl", ".obj")
TUBE_SIDES = 10
"""Sides of the polygon that tubes sweep along lines."""


# ------------------------------------------------------------------------------------------ backends
#: Offscreen OpenGL paths of the VTK wheel, in the order tried: the window class, and the system
#: packages (Debian/Ubuntu names) it needs on a headless machine.
BACKENDS = {
    "egl": (vtkEGLRenderWindow, "libegl1 and libgl1-mesa-dri"),
    "osmesa": (vtkOSOpenGLRenderWindow, "libosmesa6"),
}
_working: Optional[str] = None


def probe_backend(name: str) -> tuple[bool, str]:
    """Draw a red square offscreen with backend ``name`` and read it back: (works, the OpenGL renderer
    and version, or why not)."""
    from vtkmodules.vtkFiltersSources import vtkPlaneSource

    cls, _ = BACKENDS[name]
    with captured_messages() as messages:
        window = cls()
        window.SetOffScreenRendering(1)
        window.SetSize(64, 48)
        ok = bool(window.SupportsOpenGL())
        detail = ""
        if ok:
            renderer = vtkRenderer()
            renderer.SetBackground(0.0, 0.0, 0.0)
            window.AddRenderer(renderer)
            plane = vtkPlaneSource()
            mapper = vtkPolyDataMapper()
            mapper.SetInputConnection(plane.GetOutputPort())
            actor = vtkActor()
            actor.SetMapper(mapper)
            actor.GetProperty().SetColor(1.0, 0.0, 0.0)
            actor.GetProperty().LightingOff()
            renderer.AddActor(actor)
            renderer.ResetCamera()
            window.Render()
            grab = vtkWindowToImageFilter()
            grab.SetInput(window)
            grab.Update()
            from vtkmodules.util.numpy_support import vtk_to_numpy

            pixels = vtk_to_numpy(grab.GetOutput().GetPointData().GetScalars())
            ok = bool(pixels.size) and bool(np.any((pixels[:, 0] > 200) & (pixels[:, 1] < 50)))
            caps = window.ReportCapabilities() or ""
            found = [line.split(":", 1)[1].strip() for line in caps.splitlines()
                     if line.startswith(("OpenGL renderer string", "OpenGL version string"))]
            detail = "; ".join(found)
            window.Finalize()
    if not ok:
        problem = _first_error(messages) or next((m for m in messages if m.strip()), "") or "no OpenGL context"
        return False, problem.strip().splitlines()[-1][:200]
    return True, detail or "works"


def probe_backend_isolated(name: str, timeout: float = 60.0) -> tuple[bool, str]:
    """:func:`probe_backend` in a child process: a backend whose library is missing can crash the process
    that tries it (VTK's OSMesa window does, here), so a crash is reported, not suffered."""
    import subprocess
    import sys

    code = ("import sys; from vtkflow.render import probe_backend; ok, d = probe_backend(sys.argv[1]);"
            " print(('1 ' if ok else '0 ') + d)")
    try:
        res = subprocess.run([sys.executable, "-c", code, name], capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return False, f"the test render did not finish in {timeout:g} s"
    last = res.stdout.strip().splitlines()[-1] if res.stdout.strip() else ""
    if res.returncode != 0 or not last[:2] in ("1 ", "0 "):
        return False, f"the test render crashed (exit code {res.returncode})"
    return last.startswith("1 "), last[2:]


def working_backend() -> str:
    """The backend frames are drawn with, found once per process: EGL when VTK can create its context
    here, else OSMesa if a test render in a child process works; a :class:`VtkflowError` naming the system
    packages to install if neither does."""
    global _working
    if _working is None:
        with captured_messages():
            egl = vtkEGLRenderWindow()
            egl.SetOffScreenRendering(1)
            egl_ok = bool(egl.SupportsOpenGL())
        if egl_ok:
            _working = "egl"
        elif probe_backend_isolated("osmesa")[0]:
            _working = "osmesa"
        else:
            packages = " or ".join(p for _, p in BACKENDS.values())
            raise VtkflowError(
                "offscreen rendering is unavailable: VTK could not draw through EGL or OSMesa; a headless machine"
                f" needs the system's Mesa libraries, e.g. the Debian/Ubuntu packages {packages}"
            )
    return _working


# ------------------------------------------------------------------------------------------ reading
def _first_error(messages: list[str]) -> Optional[str]:
    """The text of the first error among VTK's messages ("ERROR: In file.cxx, line N\nClass (0x..): text")."""
    for message in messages:
        if message.startswith("ERROR"):
            lines = [line for line in message.splitlines()[1:] if line.strip()] or [message]
            return lines[0].split("): ", 1)[-1].strip()
    return None


def _update(algorithm: Any, path: Path, what: str) -> Any:
    """Run a reader; a VTK error becomes an :class:`InputError` naming ``path``.

    Readers report through helpers (the XML parser, the pipeline executive) as well as themselves,
    so VTK's messages are collected for the whole update instead of being printed.
    """
    if not path.is_file():
        raise InputError(f"{path}: {what} file not found")
    with captured_messages() as messages:
        algorithm.Update()
    error = _first_error(messages)
    if error is not None:
        raise InputError(f"{path}: cannot read {what}: {error}")
    return algorithm.GetOutputDataObject(0)


def _read_layer(path: Path, color_by: Optional[str]) -> tuple[Any, Optional[float]]:
    """The PolyData of one layer, checked for the colouring array (unless None), and its time (None if absent)."""
    reader = vtkXMLPolyDataReader()
    reader.SetFileName(str(path))
    polydata = _update(reader, path, "flow-line layer (VTK XML PolyData)")
    point_data = polydata.GetPointData()
    empty = color_by is None or (polydata.GetNumberOfPoints() == 0 and point_data.GetNumberOfArrays() == 0)
    if not empty and point_data.GetAbstractArray(color_by) is None:
        names = [point_data.GetArrayName(i) for i in range(point_data.GetNumberOfArrays())]
        listed = ", ".join(repr(n) for n in names) if names else "none"
        raise InputError(f"{path}: no point array {color_by!r} to colour by; its point arrays: {listed}")
    if not empty and point_data.GetArray(color_by) is None:
        raise InputError(f"{path}: point array {color_by!r} is not numeric and cannot colour the lines")
    time_array = polydata.GetFieldData().GetArray("time")
    time = None
    if time_array is not None and time_array.GetNumberOfTuples() > 0:
        time = float(time_array.GetTuple1(0))
    return polydata, time


def _read_surface(path: Path) -> Any:
    """A context surface as PolyData (a volume mesh is reduced to its outer surface)."""
    suffix = path.suffix.lower()
    if suffix == ".vtp":
        reader: Any = vtkXMLPolyDataReader()
    elif suffix == ".vtu":
        reader = vtkXMLUnstructuredGridReader()
    elif suffix == ".vtk":
        reader = vtkDataSetReader()
    elif suffix == ".stl":
        reader = vtkSTLReader()
    elif suffix == ".obj":
        reader = vtkOBJReader()
    else:
        kinds = ", ".join(CONTEXT_SUFFIXES)
        raise InputError(f"{path}: a context surface must be one of {kinds}, not {suffix or 'no suffix'!r}")
    reader.SetFileName(str(path))
    data = _update(reader, path, "context surface")
    if data is None:
        raise InputError(f"{path}: cannot read context surface: the file holds no data set")
    surface = vtkGeometryFilter()
    surface.SetInputData(data)
    surface.Update()
    return surface.GetOutput()


# ---------------------------------------------------------------------------------------- the scene
def _lookup_table(spec: RenderEntry) -> vtkLookupTable:
    colours = sample(spec.colormap, TABLE_SIZE)
    lut = vtkLookupTable()
    lut.SetNumberOfTableValues(TABLE_SIZE)
    for i, (r, g, b) in enumerate(colours):
        lut.SetTableValue(i, float(r), float(g), float(b), 1.0)
    lut.SetTableRange(float(spec.range[0]), float(spec.range[1]))
    lut.SetNanColor(*NAN_COLOR, 1.0)
    lut.SetVectorModeToMagnitude()
    return lut


def _text_color(background: Sequence[float]) -> tuple[float, float, float]:
    luminance = 0.2126 * background[0] + 0.7152 * background[1] + 0.0722 * background[2]
    return (0.0, 0.0, 0.0) if luminance > 0.5 else (1.0, 1.0, 1.0)


def format_time(time: float) -> str:
    """The frame time as shown in the image: three decimals, or scientific notation when tiny or huge."""
    if time == 0.0 or 1e-3 <= abs(time) < 1e6:
        return f"t = {time:.3f}"
    return f"t = {time:.3e}"


def _font_size(size: Sequence[int]) -> int:
    """Text height in points: a fortieth of the image height, at least 9."""
    return max(9, round(size[1] / 40))


def scene_width(size: Sequence[int]) -> float:
    """The fraction of the image width, from the left, that shows the scene (the legend is right of it)."""
    legend = max(LEGEND_WIDTH * size[0], 5.5 * _font_size(size))
    return 1.0 - min(legend / size[0], 0.35)


def _check_bounds(bounds: np.ndarray) -> np.ndarray:
    b = np.asarray(bounds, dtype=float)
    if b.shape != (3, 2) or not np.all(np.isfinite(b)) or np.any(b[:, 1] < b[:, 0]):
        raise ValueError(f"bounds must be a finite (3, 2) array of [min, max] rows, got {b.tolist()}")
    return b


def _place_camera(renderer: vtkRenderer, spec: RenderEntry, bounds: np.ndarray) -> None:
    camera = renderer.GetActiveCamera()
    camera.SetParallelProjection(spec.projection == "parallel")
    if spec.camera is not None:
        position = np.asarray(spec.camera.position, dtype=float)
        focus = np.asarray(spec.camera.focus, dtype=float)
        up = np.asarray(spec.camera.up, dtype=float)  # recipe.Camera has checked it against the view
        camera.SetPosition(*position)
        camera.SetFocalPoint(*focus)
        camera.SetViewUp(*up)
        camera.SetViewAngle(spec.camera.angle)
        camera.OrthogonalizeViewUp()
        if spec.projection == "parallel":  # the focus plane keeps the perspective view's height
            height = np.linalg.norm(focus - position) * math.tan(math.radians(spec.camera.angle) / 2.0)
            camera.SetParallelScale(float(height))
        return
    view = spec.view
    box = np.asarray(view.fit, dtype=float) if view is not None and view.fit is not None else bounds
    centre = box.mean(axis=1)
    back = np.asarray(VIEW_DIRECTIONS[view.direction if view is not None else "oblique"], dtype=float)
    back /= np.linalg.norm(back)
    sky = np.array([0.0, 1.0, 0.0]) if abs(back[2]) > 0.99 else np.array([0.0, 0.0, 1.0])
    right = np.cross(-back, sky)
    right /= np.linalg.norm(right)
    up = np.cross(right, -back)
    # The eye distance D that puts every box corner inside the view: a corner at offset c from the
    # centre lies at depth D - c.back, and must satisfy |c.right| <= depth tan(half width angle)
    # and |c.up| <= depth tan(half height angle). The width leaves room for the legend at the right.
    width, height = spec.size[0] * scene_width(spec.size), spec.size[1]
    tan_v = math.tan(math.radians(AUTO_VIEW_ANGLE) / 2.0)
    tan_h = tan_v * width / height * AUTO_FILL_WIDTH
    tan_v *= AUTO_FILL_HEIGHT
    corners = np.array(np.meshgrid(*box, indexing="ij")).reshape(3, -1).T - centre
    need = np.concatenate(
        [np.abs(corners @ right) / tan_h + corners @ back, np.abs(corners @ up) / tan_v + corners @ back]
    )
    distance = float(need.max())
    if not distance > 0.0:  # a degenerate box (a point): look at it from one unit away
        distance = 1.0
    camera.SetFocalPoint(*centre)
    camera.SetPosition(*(centre + distance * back))
    camera.SetViewUp(*up)
    camera.SetViewAngle(AUTO_VIEW_ANGLE)
    camera.OrthogonalizeViewUp()
    if spec.projection == "parallel":
        # half the visible height: every corner within the fill fractions of width and height
        half = max(float(np.max(np.abs(corners @ up))) / AUTO_FILL_HEIGHT,
                   float(np.max(np.abs(corners @ right))) / (AUTO_FILL_WIDTH * width / height))
        camera.SetParallelScale(half if half > 0.0 else 1.0)


class FrameRenderer:
    """One offscreen render window set up for one render entry; draw frames with :meth:`render`.

    Parameters
    ----------
    spec : RenderEntry
        Colouring, size, camera, background, line width, outline.
    bounds : (3, 2) array
        ``[[xmin, xmax], [ymin, ymax], [zmin, zmax]]`` of the mesh domain.
    context : paths
        Surfaces (.vtp, .vtu, .vtk, .stl) drawn in light grey in every frame; read once here.

    Raises
    ------
    InputError
        If a context surface is missing or unreadable.
    VtkflowError
        If no OpenGL context can be created through EGL.
    """

    def __init__(self, spec: RenderEntry, bounds: np.ndarray, context: Sequence[Path] = (),
                 boundary: Optional[Path] = None) -> None:
        self.spec = spec
        self.bounds = _check_bounds(bounds)
        # fail on bad inputs before touching OpenGL; the mesh boundary is drawn see-through
        surfaces = [(_read_surface(Path(p)), 1.0) for p in context]
        if boundary is not None:
            surfaces.append((_read_surface(Path(boundary)), float(spec.boundary_opacity)))

        window = BACKENDS[working_backend()][0]()
        window.SetOffScreenRendering(1)
        window.SetSize(int(spec.size[0]), int(spec.size[1]))
        window.SetMultiSamples(0)  # multisampling costs 2-3x per frame in software; FXAA below is cheap
        self._window = window
        renderer = vtkRenderer()
        renderer.SetViewport(0.0, 0.0, scene_width(spec.size), 1.0)
        renderer.SetBackground(*spec.background)
        renderer.UseFXAAOn()  # smooths line edges in a post pass; flat line interiors keep their colour
        window.AddRenderer(renderer)
        legend = vtkRenderer()
        legend.SetViewport(scene_width(spec.size), 0.0, 1.0, 1.0)
        legend.SetBackground(*spec.background)
        legend.InteractiveOff()
        window.AddRenderer(legend)
        self._renderer = renderer
        self._lut = _lookup_table(spec)
        text_color = _text_color(spec.background)

        if spec.outline:
            outline = vtkOutlineSource()
            outline.SetBounds(*self.bounds.ravel())
            mapper = vtkPolyDataMapper()
            mapper.SetInputConnection(outline.GetOutputPort())
            actor = vtkActor()
            actor.SetMapper(mapper)
            actor.GetProperty().SetColor(*OUTLINE_COLOR)
            actor.GetProperty().LightingOff()
            renderer.AddActor(actor)

        for surface, opacity in surfaces:
            mapper = vtkPolyDataMapper()
            mapper.SetInputData(surface)
            mapper.ScalarVisibilityOff()
            actor = vtkActor()
            actor.SetMapper(mapper)
            prop = actor.GetProperty()
            prop.SetColor(*CONTEXT_COLOR)
            prop.SetOpacity(opacity)
            prop.SetAmbient(0.6)
            prop.SetDiffuse(0.4)
            prop.SetSpecular(0.0)
            renderer.AddActor(actor)

        self._line_actors: list[vtkActor] = []
        self._slice: Optional[tuple[Any, vtkActor]] = None
        if spec.slice is not None:
            plane = vtkPlane()
            plane.SetOrigin(*spec.slice.origin)
            plane.SetNormal(*spec.slice.normal)
            reader = vtkXMLUnstructuredGridReader()
            cutter = vtkCutter()
            cutter.SetCutFunction(plane)
            cutter.SetInputConnection(reader.GetOutputPort())
            mapper = self._colour_mapper()
            mapper.SetInputConnection(cutter.GetOutputPort())
            actor = vtkActor()
            actor.SetMapper(mapper)
            actor.GetProperty().LightingOff()  # flat: a pixel's colour reads back as its value
            actor.GetProperty().SetOpacity(spec.slice.opacity)
            actor.SetVisibility(False)
            renderer.AddActor(actor)
            self._slice = (reader, actor)

        bar = vtkScalarBarActor()
        bar.SetLookupTable(self._lut)
        bar.SetNumberOfLabels(5)
        bar.SetLabelFormat("%.3g")
        bar.SetMaximumNumberOfColors(TABLE_SIZE)
        bar.SetOrientationToVertical()
        bar.GetPositionCoordinate().SetCoordinateSystemToNormalizedViewport()
        bar.GetPositionCoordinate().SetValue(0.05, 0.08)
        bar.SetWidth(0.9)
        bar.SetHeight(0.8)
        bar.SetBarRatio(0.3)
        bar.SetVerticalTitleSeparation(max(4, spec.size[1] // 60))
        bar.UnconstrainedFontSizeOn()
        font = _font_size(spec.size)
        for prop in (bar.GetTitleTextProperty(), bar.GetLabelTextProperty()):
            prop.SetColor(*text_color)
            prop.SetFontFamilyToArial()
            prop.ShadowOff()
            prop.ItalicOff()
            prop.BoldOff()
            prop.SetFontSize(font)
        legend.AddViewProp(bar)
        self._bar = bar

        clock = vtkTextActor()
        clock.GetPositionCoordinate().SetCoordinateSystemToNormalizedViewport()
        clock.GetPositionCoordinate().SetValue(0.02, 0.97)
        prop = clock.GetTextProperty()
        prop.SetColor(*text_color)
        prop.SetFontFamilyToArial()
        prop.SetFontSize(font)
        prop.SetVerticalJustificationToTop()
        prop.ShadowOff()
        renderer.AddViewProp(clock)
        self._clock = clock
        if spec.title:
            title = vtkTextActor()
            title.SetInput(spec.title)
            title.GetPositionCoordinate().SetCoordinateSystemToNormalizedViewport()
            title.GetPositionCoordinate().SetValue(0.5, 0.97)
            tprop = title.GetTextProperty()
            tprop.SetColor(*text_color)
            tprop.SetFontFamilyToArial()
            tprop.SetFontSize(int(round(font * 1.2)))
            tprop.SetJustificationToCentered()
            tprop.SetVerticalJustificationToTop()
            tprop.ShadowOff()
            renderer.AddViewProp(title)

        _place_camera(renderer, spec, self.bounds)

        grab = vtkWindowToImageFilter()
        grab.SetInput(window)
        grab.SetInputBufferTypeToRGB()
        grab.ReadFrontBufferOff()
        grab.ShouldRerenderOff()  # render() draws the frame just before reading it back
        writer = vtkPNGWriter()
        writer.SetInputConnection(grab.GetOutputPort())
        writer.SetCompressionLevel(1)  # zlib level 1: ~30 % faster than 6 on a 1280x720 frame, ~6 % larger
        self._grab = grab
        self._writer = writer

    def _colour_mapper(self) -> vtkPolyDataMapper:
        """A mapper that colours by ``spec.color_by`` through the render's table over its fixed range."""
        mapper = vtkPolyDataMapper()
        mapper.SetLookupTable(self._lut)
        mapper.UseLookupTableScalarRangeOn()  # the fixed range, never the data's
        mapper.SetScalarModeToUsePointFieldData()
        mapper.SelectColorArray(self.spec.color_by)
        mapper.SetColorModeToMapScalars()
        mapper.InterpolateScalarsBeforeMappingOn()
        mapper.ScalarVisibilityOn()
        return mapper

    def _line_actor(self, index: int) -> vtkActor:
        while len(self._line_actors) <= index:
            mapper = self._colour_mapper()
            actor = vtkActor()
            actor.SetMapper(mapper)
            prop = actor.GetProperty()
            prop.LightingOff()  # flat colours: a pixel's colour reads back as its value
            prop.SetLineWidth(float(self.spec.line_width))
            self._renderer.AddActor(actor)
            self._line_actors.append(actor)
        return self._line_actors[index]

    def render(self, layers: Sequence[Path], png: Path, names: Optional[Sequence[str]] = None,
               volume: Optional[Path] = None) -> Path:
        """Draw ``layers`` (VTP flow lines or surfaces) and write the image to ``png`` atomically; return
        ``png``. ``names`` are the layers' entry names, for their ``spec.styles``; ``volume`` is the
        vortex entry's volume file that ``spec.slice`` cuts at this frame.

        Raises
        ------
        InputError
            If a layer is missing, unreadable, or lacks the point array ``spec.color_by``.
        """
        png = Path(png)
        styles = [self.spec.styles.get(n) for n in names] if names is not None else [None] * len(layers)
        data = [_read_layer(Path(p), None if st is not None and st.color is not None else self.spec.color_by)
                for p, st in zip(layers, styles)]
        for i, ((polydata, _), style) in enumerate(zip(data, styles)):
            actor = self._line_actor(i)
            mapper = actor.GetMapper()
            tubes = style is not None and style.tube_radius is not None and polydata.GetNumberOfLines() > 0
            if tubes:
                tube = vtkTubeFilter()
                tube.SetInputData(polydata)
                tube.SetRadius(float(style.tube_radius))
                tube.SetNumberOfSides(TUBE_SIDES)
                tube.CappingOn()
                tube.Update()
                mapper.SetInputData(tube.GetOutput())
            else:
                mapper.SetInputData(polydata)
            actor.SetVisibility(polydata.GetNumberOfPoints() > 0)
            # surfaces (vortex isosurfaces) and tubes are lit to show their shape; lines keep flat colours
            lit = tubes or polydata.GetNumberOfPolys() > 0
            prop = actor.GetProperty()
            prop.SetLighting(lit)
            prop.SetAmbient(0.35 if lit else 0.0)
            single = style is not None and style.color is not None
            mapper.SetScalarVisibility(not single)
            prop.SetColor(*(style.color if single else (1.0, 1.0, 1.0)))
            prop.SetOpacity(style.opacity if style is not None else 1.0)
        if self._slice is not None:
            reader, actor = self._slice
            if volume is not None:
                volume = Path(volume)
                if not volume.is_file():
                    raise InputError(f"{volume}: no such file (the volume file a slice cuts)")
                reader.SetFileName(str(volume))
                reader.Modified()
            actor.SetVisibility(volume is not None)
        for actor in self._line_actors[len(data):]:
            actor.GetMapper().SetInputData(None)
            actor.SetVisibility(False)

        vector = any(
            (st is None or st.color is None) and p.GetPointData().GetArray(self.spec.color_by) is not None
            and p.GetPointData().GetArray(self.spec.color_by).GetNumberOfComponents() > 1
            for (p, _), st in zip(data, styles)
        )
        label = f"|{self.spec.color_by}|" if vector else self.spec.color_by
        self._bar.SetTitle(f"{label} [{self.spec.units}]" if self.spec.units else label)
        time = data[0][1] if data else None
        self._clock.SetInput(format_time(time) if time is not None else "")

        self._renderer.ResetCameraClippingRange()
        self._window.Render()
        self._grab.Modified()
        with atomic_path(png) as tmp:
            self._writer.SetFileName(str(tmp))
            with captured_messages() as messages:
                self._writer.Write()
            if self._writer.GetErrorCode() != 0 or _first_error(messages) is not None:
                detail = _first_error(messages) or f"error code {self._writer.GetErrorCode()}"
                raise OutputError(f"{png}: VTK could not write the PNG image ({detail})")
        return png

    def close(self) -> None:
        """Release the render window and its OpenGL context."""
        if self._window is not None:
            for actor in self._line_actors:
                actor.GetMapper().SetInputData(None)
            self._window.Finalize()
            self._window = None

    def __enter__(self) -> "FrameRenderer":
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()


# ------------------------------------------------------------------------------ one call per frame
_cached: Optional[tuple[Any, int, FrameRenderer]] = None


def _key(spec: RenderEntry, bounds: np.ndarray, context: Sequence[Path]) -> Any:
    return (
        spec.model_dump_json(),
        tuple(np.asarray(bounds, dtype=float).ravel().tolist()),
        tuple(str(Path(p).resolve()) for p in context),
    )


def render_frame(
    layers: Sequence[Path],
    png: Path,
    spec: RenderEntry,
    bounds: np.ndarray,
    context: Sequence[Path] = (),
    names: Optional[Sequence[str]] = None,
    boundary: Optional[Path] = None,
    volume: Optional[Path] = None,
) -> Path:
    """Render one frame to ``png`` (written atomically) and return ``png``.

    Parameters
    ----------
    layers : paths
        VTP files of flow lines, drawn as lines of ``spec.line_width`` pixels coloured by the point
        array ``spec.color_by`` over the fixed range ``spec.range``; a layer with no points draws
        nothing. The first layer's FieldData ``time`` is shown as the frame time.
    png : path
        The image to write; its folder is created.
    spec : RenderEntry
        The render's settings (size, colour map, camera, background, outline).
    bounds : (3, 2) array
        The mesh domain ``[[xmin, xmax], [ymin, ymax], [zmin, zmax]]``: outline and automatic camera.
    context : paths
        Surfaces drawn in light grey (.vtp, .vtu, .vtk, .stl, .obj).
    names : entry names of the layers, optional
        For the layers' ``spec.styles``.
    boundary : path, optional
        The mesh's boundary surface, drawn light grey at ``spec.boundary_opacity``.
    volume : path, optional
        The volume file (.vtu) that ``spec.slice`` cuts at this frame.

    Consecutive calls with the same ``spec``, ``bounds`` and ``context`` reuse one render window;
    :func:`release_window` frees it. Use :class:`FrameRenderer` directly to control its lifetime.

    Raises
    ------
    InputError
        A layer or context file is missing or unreadable, or a layer lacks ``spec.color_by``.
    """
    global _cached
    key = (_key(spec, bounds, context), str(boundary))
    pid = os.getpid()
    if _cached is None or _cached[0] != key or _cached[1] != pid:
        if _cached is not None and _cached[1] == pid:
            _cached[2].close()
        # A window inherited through fork belongs to the parent's OpenGL context: drop it unused.
        _cached = None
        _cached = (key, pid, FrameRenderer(spec, bounds, context, boundary))
    return _cached[2].render(layers, png, names, volume)


def worker_setup() -> None:
    """Start of a render worker process: Mesa's software rasteriser to one thread (unless the user set
    ``LP_NUM_THREADS``), since the workers themselves fill the CPUs; set before any OpenGL context."""
    os.environ.setdefault("LP_NUM_THREADS", "1")


def render_job(args: tuple) -> str:
    """:func:`render_frame` on plain arguments ``(layers, png, spec as a dict, bounds, context, names,
    boundary, volume)``, as sent
    to render worker processes; returns the PNG path."""
    layers, png, spec, bounds, context, names, boundary, volume = args
    return str(render_frame([Path(p) for p in layers], Path(png), RenderEntry.model_validate(spec),
                            np.asarray(bounds, dtype=float), [Path(c) for c in context], names,
                            Path(boundary) if boundary else None, Path(volume) if volume else None))


def release_window() -> None:
    """Close the render window kept by :func:`render_frame`, if any."""
    global _cached
    if _cached is not None:
        if _cached[1] == os.getpid():
            _cached[2].close()
        _cached = None
