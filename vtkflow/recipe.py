"""The recipe: a YAML file validated by pydantic models, the single source of every recipe name.

Loading reads YAML with the safe loader and validates it; every problem becomes one
:class:`~vtkflow.errors.RecipeError` line naming the file and the key path, and an unknown key names
the closest valid one. :func:`json_schema` exports the schema for editors.

The names ``vtkflow``, ``data.files``, ``data.times`` (``field``, ``pattern``, ``scale``, ``start``,
``step``), ``data.velocity``, the release shapes, ``lines.*.kind``/``release``/``start``/``stop``/
``every``/``direction`` and ``output`` are fixed: other tools rely on them.
"""

from __future__ import annotations

import difflib
import hashlib
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal, Optional, Union

import yaml
from pydantic import (
    BaseModel,
    Field,
    PositiveFloat,
    PositiveInt,
    ValidationError,
    create_model,
    field_validator,
    model_validator,
)

from ._model import Strict
from .colormaps import COLORMAPS
from .colormaps import choices as colour_map_choices
from .colormaps import known as colour_map_known
from .criteria import CRITERIA
from .errors import RecipeError
from .lines import LINE_KINDS
from .releases import SHAPES

__all__ = [
    "Recipe",
    "Data",
    "TimesSpec",
    "Release",
    "LineEntry",
    "RenderEntry",
    "VortexEntry",
    "Camera",
    "LoadedRecipe",
    "load_recipe",
    "parse_recipe",
    "json_schema",
]

Vec3 = tuple[float, float, float]
NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


def _choice(value: str, valid: list[str], what: str) -> str:
    """``value`` if it is one of ``valid``; else the one-line error that lists the choices."""
    if value not in valid:
        raise ValueError(f"unknown {what} {value!r}; choose one of {', '.join(valid)}")
    return value


def _check_names(names: dict[str, Any], what: str, section: str) -> None:
    for name in names:
        if not NAME_RE.match(str(name)):
            raise ValueError(
                f"{section}: {what} name {name!r} must start with a letter or digit and use only letters, digits, '_', '-', '.'"
            )


# ---------------------------------------------------------------------------------------------- data
class TimesSpec(Strict):
    """Where snapshot times come from: exactly one of ``field``, ``pattern`` or ``start`` + ``step``."""

    field: Optional[str] = Field(None, description="name of a one-value FieldData array in each file")
    pattern: Optional[str] = Field(
        None, description="regular expression searched in each file's base name; its first group is the time"
    )
    scale: float = Field(1.0, description="with pattern: time = scale * number")
    start: Optional[float] = Field(None, description="with step: time of the first file")
    step: Optional[PositiveFloat] = Field(None, description="with start: time between files")

    @model_validator(mode="after")
    def _one_source(self) -> "TimesSpec":
        sources = [self.field is not None, self.pattern is not None, self.start is not None or self.step is not None]
        if sum(sources) != 1:
            raise ValueError("give exactly one of 'field', 'pattern', or 'start' with 'step'")
        if (self.start is None) != (self.step is None):
            raise ValueError("'start' and 'step' go together")
        if self.scale != 1.0 and self.pattern is None:
            raise ValueError("'scale' applies to 'pattern' only")
        if self.pattern is not None:
            try:
                rx = re.compile(self.pattern)
            except re.error as exc:
                raise ValueError(f"pattern {self.pattern!r} is not a valid regular expression: {exc}") from None
            if rx.groups < 1:
                raise ValueError(f"pattern {self.pattern!r} needs a group, e.g. 'step_(\\d+)'")
        return self


class Data(Strict):
    """The transient series: files, their times and the velocity array."""

    files: Union[str, list[str]] = Field(description="glob or list of files, relative to the recipe file")
    times: Union[list[float], TimesSpec] = Field(
        default_factory=lambda: TimesSpec(field="time"),
        description="snapshot times: [t0, t1, ...] | {field: name} | {pattern: regex, scale: s} | {start: t0, step: dt}."
        " Default {field: time}; an XDMF series carries its own times",
    )
    velocity: Union[str, tuple[str, str, str]] = Field(
        description="point or cell array name (3 components), or the names of three scalar arrays"
    )
    time_interpolation: Literal["linear", "cubic"] = Field(
        "linear", description="velocity between snapshots: linear (two snapshots in memory) or cubic Hermite with"
        " slopes from the neighbouring snapshots (four in memory; for series saved coarsely in time)"
    )

    @field_validator("files")
    @classmethod
    def _not_empty(cls, v: Union[str, list[str]]) -> Union[str, list[str]]:
        if isinstance(v, list) and not v:
            raise ValueError("the list of files is empty")
        return v


# ------------------------------------------------------------------------------------------ releases
def _release_model() -> type[BaseModel]:
    fields = {name: (Optional[shape.spec], None) for name, shape in SHAPES.items()}
    model = create_model("Release", __base__=Strict, **fields)  # type: ignore[call-overload]
    model.__doc__ = "One release: exactly one shape key (" + ", ".join(SHAPES) + ")."

    def _one_shape(self: Any) -> Any:
        given = [k for k in SHAPES if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError(f"give exactly one release shape of {', '.join(SHAPES)}")
        return self

    model.shape = property(lambda self: next(k for k in SHAPES if getattr(self, k) is not None))  # type: ignore[attr-defined]
    model.spec = property(lambda self: getattr(self, self.shape))  # type: ignore[attr-defined]
    return create_model(
        "Release",
        __base__=model,
        __validators__={"_one_shape": model_validator(mode="after")(_one_shape)},
    )


Release = _release_model()


# --------------------------------------------------------------------------------------------- lines
class FrameEvery(Strict):
    """Output frames every ``every`` time units from the window start (the window end included)."""

    every: PositiveFloat


class LineEntry(Strict):
    """One flow-line entry: its kind, release, window and integration settings."""

    kind: str = Field(description="one of " + ", ".join(LINE_KINDS), json_schema_extra={"enum": list(LINE_KINDS)})
    release: str = Field(description="name of an entry of 'releases'")
    start: Optional[float] = Field(None, description="window start (default: first snapshot time)")
    stop: Optional[float] = Field(None, description="window end (default: last snapshot time)")
    every: Optional[PositiveFloat] = Field(
        None, description="time between release instants (streakline, timeline; optional on pathline)"
    )
    direction: Optional[Literal["forward", "backward", "both"]] = Field(
        None, description="streamline only: forward | backward | both (default forward)"
    )
    frames: Union[list[float], FrameEvery, None] = Field(
        None, description="output frame times (default: every snapshot time inside the window)"
    )
    step: PositiveFloat = Field(
        0.25, le=16.0, description="largest step as a fraction of the local cell size (length per step / cell size);"
        " keep it <= 1 for dopri5 too: its error estimate does not see the velocity gradient jump between cells"
    )
    integrator: Literal["rk4", "dopri5"] = Field(
        "rk4", description="rk4: classical Runge-Kutta at 'step'; dopri5: adaptive Dormand-Prince 5(4) within 'tolerance'"
    )
    tolerance: Optional[PositiveFloat] = Field(
        None, description="dopri5 only: local error per step in length units (default: 1e-3 of the local cell size)"
    )
    length: Optional[PositiveFloat] = Field(
        None, description="streamline only: longest arc length per direction (default: twice the domain diagonal)"
    )

    @field_validator("kind")
    @classmethod
    def _known_kind(cls, v: str) -> str:
        return _choice(v, sorted(LINE_KINDS), "line kind")

    @model_validator(mode="after")
    def _kind_keys(self) -> "LineEntry":
        particles = LINE_KINDS[self.kind].particles
        if particles and self.direction is not None:
            raise ValueError(f"'direction' applies to streamlines only, not to a {self.kind}")
        if not particles and self.every is not None:
            raise ValueError("'every' applies to particle lines only, not to a streamline")
        if particles and self.length is not None:
            raise ValueError(f"'length' applies to streamlines only, not to a {self.kind}")
        if self.tolerance is not None and self.integrator != "dopri5":
            raise ValueError("'tolerance' applies to integrator: dopri5 only")
        if LINE_KINDS[self.kind].needs_every and self.every is None:
            raise ValueError(f"a {self.kind} needs 'every' (time between release instants)")
        if self.start is not None and self.stop is not None and self.stop < self.start:
            raise ValueError(f"stop ({self.stop}) is before start ({self.start})")
        return self


# ------------------------------------------------------------------------------------------ vortices
class Reference(Strict):
    """Reference velocity and length: levels given in units of (velocity / length) ** power."""

    velocity: PositiveFloat
    length: PositiveFloat


class CoreLineSpec(Strict):
    """Vortex core lines (Sujudi & Haimes 1995): which to keep."""

    min_strength: float = Field(
        0.0, ge=0.0, description="smallest swirling strength (1/time) of the cells a core line may pass through"
    )
    min_length: float = Field(0.0, ge=0.0, description="shortest core line kept (length units)")


class VortexEntry(Strict):
    """One vortex entry: a criterion, its level, and what to write per frame."""

    criterion: str = Field(description="one of " + ", ".join(CRITERIA), json_schema_extra={"enum": list(CRITERIA)})
    level: float = Field(description="isosurface level; its meaning is set by 'level_is'")
    level_is: Literal["absolute", "scaled", "fraction", "percentile"] = Field(
        "absolute",
        description="absolute: the value itself; scaled: in units of (reference.velocity / reference.length) ** n"
        " (n = 2 for q and lambda2, 6 for delta, 1 for swirl); fraction: of the frame's strongest value (its"
        " maximum, for lambda2 its minimum); percentile: that percentile (0-100) of the frame's values",
    )
    reference: Optional[Reference] = Field(None, description="with level_is: scaled")
    hold: bool = Field(False, description="fraction or percentile: find the level in the first frame and keep it")
    start: Optional[float] = Field(None, description="window start (default: first snapshot time)")
    stop: Optional[float] = Field(None, description="window end (default: last snapshot time)")
    every: PositiveInt = Field(1, description="every n-th snapshot in the window (from its first)")
    arrays: list[str] = Field(default_factory=list, description="input point or cell arrays carried onto the surface")
    min_area: Optional[PositiveFloat] = Field(None, description="remove isosurface pieces with a smaller area")
    core_lines: Optional[CoreLineSpec] = Field(
        default_factory=CoreLineSpec, description="core lines and their filters; null for none"
    )
    volume: bool = Field(False, description="also write the criteria on the mesh as <entry>_volume_NNNN.vtu")

    @field_validator("criterion")
    @classmethod
    def _known_criterion(cls, v: str) -> str:
        return _choice(v, list(CRITERIA), "criterion")

    @model_validator(mode="after")
    def _level(self) -> "VortexEntry":
        if (self.level_is == "scaled") != (self.reference is not None):
            raise ValueError("'reference' goes with level_is: scaled, and only with it")
        if self.hold and self.level_is not in ("fraction", "percentile"):
            raise ValueError("'hold' applies to level_is: fraction or percentile only")
        if self.level_is == "percentile" and not 0.0 <= self.level <= 100.0:
            raise ValueError(f"a percentile level lies in [0, 100], got {self.level}")
        if self.start is not None and self.stop is not None and self.stop < self.start:
            raise ValueError(f"stop ({self.stop}) is before start ({self.start})")
        return self


# ------------------------------------------------------------------------------------------- renders
class Camera(Strict):
    """Camera placement: eye position, the point looked at, and the up direction."""

    position: Vec3
    focus: Vec3
    up: Vec3 = (0.0, 0.0, 1.0)
    angle: PositiveFloat = Field(30.0, lt=180.0, description="vertical view angle in degrees")

    @model_validator(mode="after")
    def _geometry(self) -> "Camera":
        import numpy as np

        view = np.subtract(self.focus, self.position)
        if not np.linalg.norm(view) > 0:
            raise ValueError("position and focus must differ")
        up = np.asarray(self.up, dtype=float)
        if not np.linalg.norm(np.cross(view, up)) > 1e-9 * np.linalg.norm(view) * np.linalg.norm(up):
            raise ValueError("up must not be zero or parallel to the viewing direction (focus - position)")
        return self


#: Named view directions: where the eye sits, seen from the centre of the fitted box (z is up, except
#: for the views along z, where y is up). "oblique" is downstream of an x-flow, on the -y side, above.
VIEW_DIRECTIONS = {
    "oblique": (1.0, -1.3, 0.9), "+x": (1.0, 0.0, 0.0), "-x": (-1.0, 0.0, 0.0), "+y": (0.0, 1.0, 0.0),
    "-y": (0.0, -1.0, 0.0), "+z": (0.0, 0.0, 1.0), "-z": (0.0, 0.0, -1.0),
}


class View(Strict):
    """A camera found from a named direction, fitted to a box (default: the mesh bounds)."""

    direction: str = Field("oblique", description="where the eye sits: " + ", ".join(VIEW_DIRECTIONS),
                           json_schema_extra={"enum": list(VIEW_DIRECTIONS)})
    fit: Optional[tuple[tuple[float, float], tuple[float, float], tuple[float, float]]] = Field(
        None, description="[[xmin, xmax], [ymin, ymax], [zmin, zmax]] kept in view (default: the mesh bounds)"
    )

    @field_validator("direction")
    @classmethod
    def _known_direction(cls, v: str) -> str:
        return _choice(v, list(VIEW_DIRECTIONS), "view direction")

    @model_validator(mode="after")
    def _box(self) -> "View":
        if self.fit is not None and not all(lo <= hi for lo, hi in self.fit):
            raise ValueError(f"fit must be [[xmin, xmax], [ymin, ymax], [zmin, zmax]] with min <= max, got {self.fit}")
        return self


class MovieSpec(Strict):
    """A movie of a render's frames, written after the last frame."""

    formats: list[Literal["mp4", "gif"]] = Field(
        default_factory=lambda: ["mp4"], min_length=1,
        description="mp4 (H.264, needs even image sizes) and/or gif"
    )
    fps: PositiveFloat = Field(10.0, description="frames per second")


class BoundaryRegion(Strict):
    """Surface cells of the input (boundary faces it carries), chosen by the values of one cell array."""

    array: str = Field(description="an integer cell array of the input, e.g. a patch or region number")
    values: list[int] = Field(min_length=1, description="the array values of the faces drawn")


class LayerStyle(Strict):
    """How one entry is drawn in a render (default: lines, or the surface, coloured by color_by)."""

    tube_radius: Optional[PositiveFloat] = Field(None, description="draw lines as lit tubes of this radius (length units)")
    color: Optional[Vec3] = Field(None, description="one colour [r, g, b] in 0..1 instead of colouring by color_by")
    opacity: float = Field(1.0, gt=0.0, le=1.0, description="1 opaque; below 1 see-through (e.g. vortex surfaces)")


class SliceSpec(Strict):
    """A plane cut through the criteria a vortex entry writes on the mesh (its ``volume`` files), coloured
    by the render's color_by over the render's range."""

    entry: str = Field(description="a vortex entry with volume: true")
    origin: Vec3
    normal: Vec3
    opacity: float = Field(1.0, gt=0.0, le=1.0)

    @model_validator(mode="after")
    def _plane(self) -> "SliceSpec":
        if not any(self.normal):
            raise ValueError("normal must not be zero")
        return self


#: Point arrays of a vortex entry's volume files (what a slice can be coloured by).
VOLUME_ARRAYS = ("q", "lambda2", "delta", "swirl", "vorticity", "vorticity_magnitude", "speed")


class RenderEntry(Strict):
    """One image per frame of the first listed line entry, coloured by one array over a fixed range."""

    lines: list[str] = Field(min_length=1, description="line or vortex entries drawn (vortex entries: their"
                             " isosurfaces); frames follow the first")
    color_by: str = Field("speed", description="point array that colours the lines")
    range: Union[tuple[float, float], Literal["auto"]] = Field(
        description="fixed colour range [low, high], the same in every frame; or auto: the smallest and largest"
        " value over every frame of the render (found in a first pass, kept in the manifest and reused by"
        " --render-only)"
    )
    colormap: str = Field("ember", description="one of " + ", ".join(COLORMAPS) + ", or a name of matplotlib's colour map"
                          " registry (e.g. viridis, cividis, coolwarm)")
    size: tuple[PositiveInt, PositiveInt] = Field((1280, 720), description="image width and height in pixels")
    camera: Optional[Camera] = Field(None, description="eye, focus, up and angle (default: 'view')")
    view: Optional[View] = Field(None, description="a named direction fitted to a box; default: oblique on the domain")
    projection: Literal["perspective", "parallel"] = Field("perspective", description="perspective or parallel")
    title: Optional[str] = Field(None, description="a title at the top of every image")
    units: Optional[str] = Field(None, description="units of color_by, shown in the colour bar's title")
    background: Vec3 = (1.0, 1.0, 1.0)
    line_width: PositiveFloat = 2.0
    outline: bool = Field(True, description="draw the domain's bounding box")
    context: list[str] = Field(
        default_factory=list, description="surface files drawn in grey for context, relative to the recipe file"
    )
    movie: Optional[MovieSpec] = Field(None, description="also write <render>.mp4 / .gif from the frames")
    styles: dict[str, LayerStyle] = Field(default_factory=dict, description="per entry of 'lines': how it is drawn")
    slice: Optional[SliceSpec] = Field(None, description="a plane cut through a vortex entry's volume files")
    boundary: Union[bool, BoundaryRegion] = Field(
        False, description="true: draw the mesh's boundary surface in light grey; {array, values}: only the surface"
        " cells of the input whose cell array has one of these values (a boundary region the input names)"
    )
    boundary_opacity: float = Field(0.25, gt=0.0, le=1.0, description="opacity of the boundary surface")

    @field_validator("colormap")
    @classmethod
    def _known_map(cls, v: str) -> str:
        if not colour_map_known(v):
            raise ValueError(f"unknown colormap {v!r}; choose one of {colour_map_choices()}")
        return v

    @model_validator(mode="after")
    def _range(self) -> "RenderEntry":
        if self.range != "auto" and not self.range[0] < self.range[1]:
            raise ValueError(f"range must be [low, high] with low < high, got {list(self.range)}")
        for name in self.styles:
            if name not in self.lines:
                raise ValueError(f"styles.{name}: not one of this render's lines ({', '.join(self.lines)})")
        if self.camera is not None and self.view is not None:
            raise ValueError("give 'camera' or 'view', not both")
        if self.movie is not None and "mp4" in self.movie.formats and (self.size[0] % 2 or self.size[1] % 2):
            raise ValueError(f"an mp4 movie needs an even image width and height, got size {list(self.size)}")
        return self


# -------------------------------------------------------------------------------------------- recipe
class Recipe(Strict):
    """A vtkflow recipe."""

    vtkflow: Literal[1] = Field(description="recipe format version")
    data: Data
    releases: dict[str, Release] = Field(default_factory=dict)  # type: ignore[valid-type]
    lines: dict[str, LineEntry] = Field(default_factory=dict)
    vortices: dict[str, VortexEntry] = Field(default_factory=dict)
    renders: dict[str, RenderEntry] = Field(default_factory=dict)
    output: str = Field("out", description="output folder, relative to the recipe file")

    @model_validator(mode="after")
    def _references(self) -> "Recipe":
        _check_names(self.releases, "release", "releases")
        _check_names(self.lines, "line entry", "lines")
        _check_names(self.renders, "render", "renders")
        _check_names(self.vortices, "vortex entry", "vortices")
        for name in self.vortices:
            if name in self.lines:
                raise ValueError(f"vortices.{name}: a vortex entry may not share its name with a line entry")
        for name, entry in self.lines.items():
            if entry.release not in self.releases:
                raise ValueError(_unknown("release", entry.release, self.releases, f"lines.{name}.release"))
        for name, render in self.renders.items():
            cut = render.slice
            if cut is not None:
                if cut.entry not in self.vortices or not self.vortices[cut.entry].volume:
                    raise ValueError(f"renders.{name}.slice.entry: {cut.entry!r} is not a vortex entry with volume: true")
                if render.color_by not in VOLUME_ARRAYS:
                    raise ValueError(f"renders.{name}.color_by: a slice is coloured by one of {', '.join(VOLUME_ARRAYS)}")
            if name in self.lines or name in self.vortices:
                raise ValueError(f"renders.{name}: a render may not share its name with a line or vortex entry")
            for line in render.lines:
                if line in self.vortices:  # a vortex entry's isosurface
                    v = self.vortices[line]
                    kind, arrays = "vortex", (v.criterion, "speed", "vorticity_magnitude", *v.arrays)
                elif line in self.lines:
                    kind, arrays = self.lines[line].kind, LINE_KINDS[self.lines[line].kind].arrays
                else:
                    raise ValueError(_unknown("line or vortex entry", line, {**self.lines, **self.vortices},
                                              f"renders.{name}.lines"))
                style = render.styles.get(line)
                if (style is None or style.color is None) and render.color_by not in arrays:
                    raise ValueError(
                        f"renders.{name}.color_by: {kind} files of '{line}' have no array"
                        f" {render.color_by!r}; choose one of {', '.join(arrays)}"
                    )
        return self


def _unknown(what: str, name: str, valid: dict[str, Any], where: str) -> str:
    close = difflib.get_close_matches(name, list(valid), n=1, cutoff=0.5)
    hint = f"did you mean {close[0]!r}?" if close else f"choose one of {', '.join(valid) or '(none defined)'}"
    return f"{where}: unknown {what} {name!r}; {hint}"


# ------------------------------------------------------------------------------------------- loading
@dataclass(frozen=True)
class LoadedRecipe:
    """A validated recipe with the file it came from."""

    recipe: Recipe
    path: Path
    sha256: str

    @property
    def base(self) -> Path:
        """The folder that recipe paths are relative to."""
        return self.path.parent


_TYPE_NAMES = {"str", "int", "float", "bool", "list", "dict", "tuple", "none"}


def _is_union_tag(item: Any) -> bool:
    if not isinstance(item, str):
        return False
    return "[" in item or item.lower() in _TYPE_NAMES or item in _MODEL_NAMES


def _format_error(err: dict[str, Any]) -> tuple[str, str]:
    loc = ".".join(str(p) for p in err["loc"] if not _is_union_tag(p))
    msg = str(err["msg"])
    for prefix in ("Value error, ", "Assertion failed, "):
        if msg.startswith(prefix):
            msg = msg[len(prefix):]
    if err["type"] == "missing" and err["loc"] and isinstance(err["loc"][-1], int):
        loc = ".".join(str(p) for p in err["loc"][:-1] if not _is_union_tag(p))
        msg = f"too few values (needs {err['loc'][-1] + 1} or more)"
    elif err["type"] == "missing":
        msg = "missing required key"
    elif err["type"] == "too_long":
        msg = f"{msg[0].lower()}{msg[1:]}"
    elif err["type"] not in ("value_error", "assertion_error", "extra_forbidden"):
        msg = f"{msg[0].lower()}{msg[1:]} (got {err.get('input')!r})"
    return loc, msg


def _best_error(exc: ValidationError) -> tuple[str, str]:
    """The most telling error of a validation failure: for a union, the branch that matched the input's type."""
    errors = exc.errors()
    mismatch = ("_type", "model_attributes_type")
    specific = [e for e in errors if not e["type"].endswith(mismatch)]
    return _format_error((specific or errors)[0])


def parse_recipe(data: Any, source: str = "recipe") -> Recipe:
    """Validate a recipe given as plain data (e.g. a dict); errors name ``source`` and the key path."""
    if not isinstance(data, dict):
        raise RecipeError(f"{source}: expected a mapping of recipe keys at the top level, got {type(data).__name__}")
    try:
        return Recipe.model_validate(data)
    except ValidationError as exc:
        loc, msg = _best_error(exc)
        raise RecipeError(f"{source}: {loc + ': ' if loc else ''}{msg}") from None


def load_recipe(path: str | Path) -> LoadedRecipe:
    """Read and validate a recipe file.

    Raises
    ------
    RecipeError
        With one line naming the file, the key path and what was expected.
    InputError
        If the file cannot be read.
    """
    from .errors import InputError

    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise InputError(f"{path}: cannot read recipe: {exc.strerror or exc}") from None
    try:
        data = yaml.safe_load(raw)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f":{mark.line + 1}" if mark is not None else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise RecipeError(f"{path}{where}: YAML syntax error: {problem}") from None
    recipe = parse_recipe(data, str(path))
    return LoadedRecipe(recipe=recipe, path=path.resolve(), sha256=hashlib.sha256(raw).hexdigest())


def json_schema() -> dict[str, Any]:
    """JSON Schema of the recipe, for editors."""
    schema = Recipe.model_json_schema()
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["title"] = "vtkflow recipe"
    return schema


_MODEL_NAMES = {"Recipe", "Data", "TimesSpec", "Release", "LineEntry", "RenderEntry", "Camera", "FrameEvery",
                "VortexEntry", "Reference", "CoreLineSpec", "MovieSpec", "View", "LayerStyle",
                "SliceSpec", "BoundaryRegion"} | {
    getattr(s.spec, "__name__", "") for s in SHAPES.values()
}
