"""The one place vtkflow imports VTK from: only the modules it needs, none that load OpenGL.

Rendering classes are imported lazily by ``vtkflow.render``.
"""

from __future__ import annotations

from vtkmodules.util.numpy_support import numpy_to_vtk, vtk_to_numpy  # noqa: F401
from vtkmodules.vtkCommonCore import (  # noqa: F401
    vtkCommand,
    vtkDoubleArray,
    vtkIdTypeArray,
    vtkLogger,
    vtkObject,
    vtkOutputWindow,
    vtkPoints,
    vtkStringArray,
)
from vtkmodules.vtkCommonDataModel import (  # noqa: F401
    vtkCellArray,
    vtkPolyData,
    vtkUnstructuredGrid,
)
from vtkmodules.vtkCommonExecutionModel import vtkStreamingDemandDrivenPipeline  # noqa: F401
from vtkmodules.vtkFiltersCore import vtkProbeFilter  # noqa: F401
from vtkmodules.vtkFiltersPoints import vtkPointInterpolator  # noqa: F401
from vtkmodules.vtkFiltersVerdict import vtkCellSizeFilter  # noqa: F401
from vtkmodules.vtkCommonDataModel import vtkStaticCellLocator  # noqa: F401
from vtkmodules.vtkIOLegacy import vtkUnstructuredGridReader  # noqa: F401
from vtkmodules.vtkIOXML import (  # noqa: F401
    vtkXMLPolyDataReader,
    vtkXMLPolyDataWriter,
    vtkXMLUnstructuredGridReader,
    vtkXMLUnstructuredGridWriter,
)
