"""Progress bars on standard error, shown only to a person at a terminal."""

from __future__ import annotations

import sys
from typing import Any

from tqdm.auto import tqdm

__all__ = ["progress_bar", "want_progress"]


def want_progress(quiet: bool = False) -> bool:
    """True if a progress bar should be shown: not quiet and stderr is a terminal."""
    return (not quiet) and sys.stderr.isatty()


def progress_bar(enabled: bool, **kwargs: Any) -> tqdm:
    """A tqdm bar on standard error; a silent no-op bar when `enabled` is False."""
    kwargs.setdefault("leave", False)
    kwargs.setdefault("dynamic_ncols", True)
    return tqdm(file=sys.stderr, disable=not enabled, **kwargs)
