"""Shared pytest fixtures."""

from __future__ import annotations

from typing import Iterator

import pytest


@pytest.fixture(autouse=True)
def vtk_errors_fail() -> Iterator[list[str]]:
    """Fail the test if VTK reports an error or a warning while it runs (every test).

    VTK reports problems through its output window, which invokes ``ErrorEvent``/``WarningEvent``
    on itself before printing; an observer there sees every message that was not already handled by
    an observer on the object that raised it (vtkflow's readers trap their own errors that way). The
    fixture yields the list of messages; a test that provokes a message on purpose clears the list.

    It applies to every test (autouse); a test that expects a message takes the fixture as an argument
    and clears the list.
    """
    from vtkmodules.util.misc import calldata_type
    from vtkmodules.vtkCommonCore import VTK_STRING, vtkCommand, vtkOutputWindow

    messages: list[str] = []

    @calldata_type(VTK_STRING)
    def on_message(_obj: object, event: str, text: object) -> None:
        messages.append(f"{event}: {str(text).strip()}")

    window = vtkOutputWindow.GetInstance()
    tags = [window.AddObserver(event, on_message) for event in (vtkCommand.ErrorEvent, vtkCommand.WarningEvent)]
    try:
        yield messages
    finally:
        for tag in tags:
            window.RemoveObserver(tag)
    if messages:
        pytest.fail("VTK reported during the test:\n" + "\n".join(messages), pytrace=False)


_ACCURACY: list[tuple[str, float, float, str]] = []


@pytest.fixture
def accuracy():
    """``accuracy(check, error, tolerance, note)`` records an analytic check's figures for the summary."""

    def record(check: str, error: float, tolerance: float, note: str = "") -> None:
        _ACCURACY.append((check, float(error), float(tolerance), note))

    return record


def pytest_terminal_summary(terminalreporter, exitstatus, config):  # noqa: ARG001
    """Print the accuracy table of the analytic checks after the run."""
    if not _ACCURACY:
        return
    tr = terminalreporter
    tr.section("accuracy of the analytic checks")
    tr.write_line(f"{'check':<58} {'error':>10} {'tolerance':>10}  note")
    for check, error, tol, note in _ACCURACY:
        tr.write_line(f"{check:<58} {error:>10.2e} {tol:>10.2e}  {note}")
