"""Exception types a user can cause.

Every error a user can trigger with a scenario file, an input layer or a command-line option is a
:class:`GridpopError`. The command line turns these into one clear message on stderr and exit
code 2;
anything else is an internal error (exit code 1).
"""

from __future__ import annotations


class GridpopError(Exception):
    """Root of all errors a user can cause."""


class ScenarioError(GridpopError, ValueError):
    """A scenario file, key or value is missing, misspelt, of the wrong type or out of range."""


class InputDataError(GridpopError, OSError):
    """An input raster or vector layer is missing, unreadable or unusable on the grid."""


class OutputExistsError(GridpopError, FileExistsError):
    """The output folder exists and ``--overwrite`` was not given."""


class RunStateError(GridpopError, RuntimeError):
    """A run cannot be started or resumed (changed scenario, no room, unreachable cluster)."""


class ScenarioWarning(UserWarning):
    """A scenario that runs but is probably not what the user meant (a capacity of a few
    individuals per cell, a population that starts below the quasi-extinction threshold, an
    action area off the grid, keys the dispersal method ignores). The command line prints one
    line per warning on stderr, for ``check`` and ``run`` alike. ``file`` is the scenario file,
    ``detail`` the rest of the message (``file: detail``)."""

    def __init__(self, file, detail: str) -> None:
        super().__init__(str(file), detail)  # both in args: a pickled copy is rebuilt whole
        self.file = str(file)
        self.detail = detail

    def __str__(self) -> str:
        return f"{self.file}: {self.detail}"


def where(file, section: str | None = None, key: str | None = None) -> str:
    """Format the location part of a message: ``file: [section] key``."""
    loc = str(file)
    if section:
        loc += f": [{section}]"
        if key:
            loc += f" {key}"
    return loc


def where_layer(file, section, key, path) -> str:
    return f"{where(file, section, key)} ({path})"
