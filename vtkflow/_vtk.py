"""The one place vtkflow imports VTK from: only the modules it needs, none that load OpenGL.

Rendering classes are imported lazily by ``vtkflow.render``.
"""

from __future__ import annotations

from contextlib import contextmanager
from typing import Iterator

from vtkmodules.util.numpy_support import numpy_to_vtk, vtk_to_numpy  # noqa: F401
from vtkmodules.vtkCommonCore import (  # noqa: F401
    vtkIdTypeArray,
    vtkLogger,
    vtkOutputWindow,
    vtkPoints,
    vtkStringArray,
    vtkStringOutputWindow,
)
from vtkmodules.vtkCommonDataModel import (  # noqa: F401
    vtkCellArray,
    vtkPolyData,
    vtkStaticCellLocator,
    vtkUnstructuredGrid,
)
from vtkmodules.vtkIOLegacy import vtkUnstructuredGridReader  # noqa: F401
from vtkmodules.vtkIOXML import (  # noqa: F401
    vtkXMLPolyDataReader,
    vtkXMLPolyDataWriter,
    vtkXMLUnstructuredGridReader,
    vtkXMLUnstructuredGridWriter,
)


_threads_set = False


def use_threads() -> None:
    """Run VTK's SMP-parallel filters on threads (the wheels default to one thread), as many as numba
    uses; once per process."""
    global _threads_set
    if _threads_set:
        return
    import numba
    from vtkmodules.vtkCommonCore import vtkSMPTools

    vtkSMPTools.SetBackend("STDThread")
    vtkSMPTools.Initialize(numba.get_num_threads())
    _threads_set = True


@contextmanager
def captured_messages() -> Iterator[list[str]]:
    """Collect VTK's error and warning text instead of letting VTK print it; yields the list it fills.

    The messages are split per report when the block ends; VTK's logger is silenced meanwhile.
    """
    window = vtkStringOutputWindow()
    previous = vtkOutputWindow.GetInstance()
    cutoff = vtkLogger.GetCurrentVerbosityCutoff()
    messages: list[str] = []
    vtkOutputWindow.SetInstance(window)
    vtkLogger.SetStderrVerbosity(vtkLogger.VERBOSITY_OFF)
    try:
        yield messages
    finally:
        vtkOutputWindow.SetInstance(previous)
        vtkLogger.SetStderrVerbosity(vtkLogger.ConvertToVerbosity(cutoff))
        text = window.GetOutput() or ""
        messages.extend(m.strip() for m in text.split("\n\n") if m.strip())
