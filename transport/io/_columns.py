"""Mapping of column names found in files to canonical names.

Canonical names: ``step``, ``time``, ``dt``, ``pxx`` ``pyy`` ``pzz`` ``pxy`` ``pxz`` ``pyz`` (and
``pyx`` ``pzx`` ``pzy`` for files that write all nine components), ``press``, ``volume``,
``temperature``, ``lx`` ``ly`` ``lz``, ``density``.

Names are matched case-insensitively, ignoring ``_``, ``-``, ``.``, spaces and brackets, so
``Pxy``, ``P_xy``, ``p_X_y``, ``Pres-XY`` and ``pressure_xy`` all mean ``pxy``. Engine-specific
indirections (``c_ID[k]`` of a pressure compute, ``v_name`` of an equal-style variable) are
resolved by the log reader from the commands echoed in the log, and passed here as `aliases`.

References
----------
.. [1] The thermo keywords (``step``, ``temp``, ``press``, ``vol``, ``lx``, ``pxx`` ... ``pyz``,
   ...) and the order of the six values of a pressure compute (xx, yy, zz, xy, xz, yz) are
   those of the engine's documentation (common practice; quoted from memory).
.. [2] The energy-file term names (``Pres-XX`` ... ``Pres-ZZ``, ``Volume``, ``Temperature``,
   ``Box-X``) are those the energy-file library reports (checked against pyedr's output
   on the MDAnalysis test files).
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping

__all__ = [
    "PRESSURE_COMPONENTS",
    "TENSOR_ORDER",
    "canonical_name",
    "map_columns",
]

#: The six independent components in the order of a pressure compute's vector.
TENSOR_ORDER: tuple[str, ...] = ("pxx", "pyy", "pzz", "pxy", "pxz", "pyz")
#: All nine components a file may carry.
PRESSURE_COMPONENTS: tuple[str, ...] = (*TENSOR_ORDER, "pyx", "pzx", "pzy")

_PAIRS = ("xx", "yy", "zz", "xy", "xz", "yz", "yx", "zx", "zy")

_ALIASES: dict[str, str] = {
    "step": "step",
    "steps": "step",
    "timestep": "step",  # the time-averaging output calls the step number "TimeStep"
    "time": "time",
    "simulationtime": "time",
    "dt": "dt",
    "vol": "volume",
    "volume": "volume",
    "temp": "temperature",
    "temperature": "temperature",
    "cthermotemp": "temperature",
    "press": "press",
    "pressure": "press",
    "cthermopress": "press",
    "lx": "lx",
    "ly": "ly",
    "lz": "lz",
    "boxx": "lx",
    "boxy": "ly",
    "boxz": "lz",
    "density": "density",
}
for _ab in _PAIRS:
    for _prefix in ("p", "pres", "pressure", "press"):
        _ALIASES[_prefix + _ab] = "p" + _ab

_STRIP = re.compile(r"[\s_\-.\[\]()]+")
_UNIT_SUFFIX = re.compile(r"\s+\([A-Za-z/^0-9 .]*\)$")


def _normalise(name: str) -> str:
    return _STRIP.sub("", name.strip().strip("\"'").lower())


def canonical_name(name: str) -> str | None:
    """The canonical name of a column name, or None if it has none.

    Parameters
    ----------
    name : str
        Column name as written in a file (``Pxy``, ``P_xy``, ``v_pxy``, ``Pres-XY``, ...).
        A ``v_`` prefix (an equal-style variable whose definition is not known) is dropped
        before matching, so ``v_pxy`` maps to ``pxy``.

    Returns
    -------
    str or None
        One of the canonical names listed in the module docstring.

    Examples
    --------
    >>> canonical_name("P_xY"), canonical_name("Volume"), canonical_name("TimeStep")
    ('pxy', 'volume', 'step')
    >>> canonical_name("E_pair") is None
    True
    >>> canonical_name("Pres-XY (bar)"), canonical_name("Pressure (bar)")
    ('pxy', 'press')
    """
    text = name.strip()
    if text[:2].lower() == "v_":
        text = text[2:]
    # older energy files name terms with their unit: "Pres-XX (bar)", "Pressure (bar)"
    text = _UNIT_SUFFIX.sub("", text) or text
    return _ALIASES.get(_normalise(text))


# Preference when several columns map to one canonical name: plain keywords first, then
# columns resolved through echoed definitions, then name-only guesses from variables.
_RANK_KEYWORD, _RANK_DEFINED, _RANK_GUESS = 0, 1, 2


def map_columns(
    names: Iterable[str], aliases: Mapping[str, str | None] | None = None
) -> tuple[dict[str, str], list[str]]:
    """Map column names to canonical names.

    Parameters
    ----------
    names : iterable of str
        Column names in file order.
    aliases : mapping, optional
        Column name -> canonical name for names resolved from definitions (a pressure
        compute's ``c_ID[k]``, an equal-style variable ``v_name``); these override the
        name-based rule. None marks a column whose definition is known to be something
        else (e.g. ``variable pxy equal pxy*2``): it gets no canonical name.

    Returns
    -------
    canonical : dict
        Canonical name -> the column name used for it.
    notes : list of str
        Columns that map to a canonical name already taken (kept in the table, not used).
    """
    aliases = dict(aliases or {})
    best: dict[str, tuple[int, int, str]] = {}
    notes: list[str] = []
    for pos, name in enumerate(names):
        if name in aliases:
            canon, rank = aliases[name], _RANK_DEFINED
        else:
            canon = canonical_name(name)
            rank = _RANK_GUESS if name.strip()[:2].lower() == "v_" else _RANK_KEYWORD
        if canon is None:
            continue
        if canon in best:
            old_rank, _, old = best[canon]
            if rank < old_rank:
                notes.append(f"column {old!r} also means {canon}; used {name!r}")
                best[canon] = (rank, pos, name)
            else:
                notes.append(f"column {name!r} also means {canon}; used {old!r}")
            continue
        best[canon] = (rank, pos, name)
    ordered = sorted(best.items(), key=lambda kv: kv[1][1])
    return {canon: name for canon, (_, _, name) in ordered}, notes
