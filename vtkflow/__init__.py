"""vtkflow: time-accurate flow lines from transient CFD series on unstructured meshes.

Streamlines, pathlines, streaklines and timelines, computed from a YAML recipe and written as VTK
PolyData; renders are made offscreen. Rendering is imported only when asked for.
"""

from __future__ import annotations

__version__ = "0.1.0"

from .errors import InputError, RecipeError, VtkflowError
from .lines import LINE_KINDS, STATUS_NAMES
from .mesh import Mesh
from .particles import Status, TimeField, advance, trace_streamlines
from .recipe import LoadedRecipe, Recipe, json_schema, load_recipe, parse_recipe
from .releases import SHAPES, release_points
from .run import open_series, plan, run_recipe
from .series import Series
from .api import trace
from .criteria import CRITERIA, GradientOperator, evaluate

__all__ = [
    "__version__",
    "VtkflowError",
    "RecipeError",
    "InputError",
    "LINE_KINDS",
    "STATUS_NAMES",
    "Mesh",
    "Status",
    "TimeField",
    "advance",
    "trace_streamlines",
    "Recipe",
    "LoadedRecipe",
    "load_recipe",
    "parse_recipe",
    "json_schema",
    "SHAPES",
    "release_points",
    "open_series",
    "plan",
    "run_recipe",
    "Series",
    "trace",
    "CRITERIA",
    "GradientOperator",
    "evaluate",
]
