"""Command-line interface: parses options, calls the library, prints.

One module per command (``viscosity``, ``diffusion``, ``average``, ``inspect``, ``check``,
``demo``, ``report``); the group and its failure handling in ``_group``, options and helpers
shared by the commands in ``_shared``. Each command parses, calls the library and prints.

Every failure caused by the input is one line on standard error naming the file, the line,
what was expected and the fix, with exit code 2 and no traceback (``--debug`` shows it).
Output files (``--json``, ``--plot``) are written only after every computation succeeded;
missing folders on their paths are then created. An output path that is one of the inputs,
or that runs through an existing file, is refused before anything is read.
"""

from __future__ import annotations

# Importing the command modules registers their commands on the group.
from . import average, check, compare, demo, diffusion, inspect, report, viscosity  # noqa: F401
from ._group import main

__all__ = ["main"]
