"""The two ASD unit families a profile may be written in, and how their names are read.

A profile's ASD is either in g^2/Hz (g the standard acceleration of gravity)
or in (m/s^2)^2/Hz; one g^2/Hz is ``g0^2 = 9.80665^2 = 96.17`` (m/s^2)^2/Hz.
This module holds the one table of accepted spellings that both the TOML
reader (the ``unit`` key) and the CSV reader (the ASD column's header) use,
so the same spelling means the same unit in both.

Reading a name is exact, never a guess: a spelling is normalised (case,
spaces around ``/ ^ ( ) *``, ``**`` for ``^``, superscript digits, ``per``
for ``/``) and then must equal one of the accepted spellings.  A CSV header
cell is searched for accepted spellings as whole tokens (``mm^2/s^4/Hz`` does
not contain ``m^2/s^4/Hz``); a cell that names neither family or both is
refused by the reader.

This module imports nothing beyond the standard library, so the command line
can name the units without loading numpy.

References
----------
Standard acceleration of gravity g0 = 9.80665 m/s^2: 3rd CGPM (1901);
ISO 80000-3:2019, item 3-9.2.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

#: Standard acceleration of gravity in m/s^2 (3rd CGPM 1901; ISO 80000-3).
STANDARD_GRAVITY_M_S2 = 9.80665


@dataclass(frozen=True)
class AsdUnit:
    """One ASD unit family: its canonical name, the factor to g^2/Hz and its accepted spellings.

    Parameters
    ----------
    name : str
        Canonical spelling, e.g. ``"g^2/Hz"``.
    to_g2_per_hz : float
        Multiply a value in this unit by this factor to get g^2/Hz.
    spellings : tuple of str
        Spellings accepted for it (shown in messages); spaces, case, ``**``
        for ``^`` and ``per`` for ``/`` are accepted on top of these.

    Examples
    --------
    >>> SI_ASD.to_g2_per_hz * STANDARD_GRAVITY_M_S2**2
    1.0

    References
    ----------
    ISO 80000-3:2019 (standard acceleration of gravity).
    """

    name: str
    to_g2_per_hz: float
    spellings: tuple[str, ...]

    @property
    def keys(self) -> frozenset[str]:
        """The normalised forms of :attr:`spellings` (see :func:`normalize_unit`)."""
        return frozenset(normalize_unit(spelling) for spelling in self.spellings)


#: g^2/Hz, the tool's own unit.
G2_PER_HZ = AsdUnit("g^2/Hz", 1.0, ("g^2/Hz", "g2/Hz", "g²/Hz", "g**2/Hz"))

#: (m/s^2)^2/Hz, the SI unit of acceleration spectral density.
SI_ASD = AsdUnit(
    "(m/s^2)^2/Hz",
    1.0 / (STANDARD_GRAVITY_M_S2 * STANDARD_GRAVITY_M_S2),
    ("(m/s^2)^2/Hz", "(m/s2)2/Hz", "(m/s²)²/Hz", "(m/s**2)**2/Hz", "m^2/s^4/Hz", "m2/s4/Hz", "m²/s⁴/Hz",
     "m**2/s**4/Hz"),
)

#: Every accepted unit family, the tool's own first.
ASD_UNITS: tuple[AsdUnit, ...] = (G2_PER_HZ, SI_ASD)

#: The accepted spellings as one phrase for messages.
ACCEPTED_SPELLINGS = " or ".join(
    f"{unit.name} (also {', '.join(s for s in unit.spellings if s != unit.name)})" for unit in ASD_UNITS
)

_SUPERSCRIPTS = str.maketrans({"²": "^2", "⁴": "^4", "³": "^3", "¹": "^1", "⁻": "^-"})
_PER = re.compile(r"(?:\s+|_)per(?:\s+|_)")
_SPACE_AROUND = re.compile(r"\s*([/^()*\[\]])\s*")


def normalize_unit(text: str) -> str:
    """A unit spelling in normal form: lower case, ``^`` and spaces around operators dropped.

    ``**`` and superscript digits become plain exponents, `` per `` and
    ``_per_`` become ``/``; spaces between words are kept (as one space).

    Parameters
    ----------
    text : str
        A unit spelling or a header cell.

    Returns
    -------
    str
        The normal form, e.g. ``"(m/s2)2/hz"`` for ``"(m/s²)² / Hz"``.

    Examples
    --------
    >>> normalize_unit("g**2 / Hz")
    'g2/hz'
    >>> normalize_unit("asd_m2_per_s4_per_hz")
    'asd_m2/s4/hz'

    References
    ----------
    Unit symbols and exponents as written in ISO 80000-1:2009, clause 7.
    """
    folded = str(text).translate(_SUPERSCRIPTS).lower().replace("**", "^")
    folded = " ".join(folded.split())
    folded = _PER.sub("/", f" {folded} ").strip()
    folded = _SPACE_AROUND.sub(r"\1", folded)
    return folded.replace("^", "")


def _token_pattern(unit: AsdUnit) -> re.Pattern:
    parts = []
    for key in sorted(unit.keys, key=len, reverse=True):
        before = r"(?<![a-z0-9])" if key[0].isalnum() else ""
        parts.append(before + re.escape(key) + r"(?![a-z0-9])")
    return re.compile("|".join(parts))


_PATTERNS = tuple((unit, _token_pattern(unit)) for unit in ASD_UNITS)


def asd_unit(text: str) -> AsdUnit | None:
    """The unit family a whole spelling names (e.g. a TOML ``unit`` value), or None.

    Parameters
    ----------
    text : str
        The spelling, e.g. ``"m^2/s^4/Hz"``.

    Returns
    -------
    AsdUnit or None
        :data:`G2_PER_HZ`, :data:`SI_ASD`, or None if it is neither.

    Examples
    --------
    >>> asd_unit("(m/s²)²/Hz").name
    '(m/s^2)^2/Hz'
    >>> asd_unit("g/Hz") is None
    True

    References
    ----------
    ISO 80000-1:2009 (writing unit symbols); ISO 80000-3:2019 (g0).
    """
    key = normalize_unit(text)
    for unit in ASD_UNITS:
        if key in unit.keys:
            return unit
    return None


def asd_units_named_in(text: str) -> list[tuple[AsdUnit, str]]:
    """Every unit family named as a whole token inside a header cell, with the token found.

    Parameters
    ----------
    text : str
        A header cell such as ``"ASD (m^2/s^4/Hz)"`` or ``"asd_g2_per_hz"``.

    Returns
    -------
    list of (AsdUnit, str)
        One entry per family found (in :data:`ASD_UNITS` order) with the
        normalised token that names it; empty if none.

    Examples
    --------
    >>> [(u.name, token) for u, token in asd_units_named_in("ASD (m^2/s^4/Hz)")]
    [('(m/s^2)^2/Hz', 'm2/s4/hz')]
    >>> asd_units_named_in("ASD (mm^2/s^4/Hz)")
    []

    References
    ----------
    ISO 80000-1:2009 (writing unit symbols).
    """
    key = normalize_unit(text)
    found = []
    for unit, pattern in _PATTERNS:
        match = pattern.search(key)
        if match:
            found.append((unit, match.group(0)))
    return found
