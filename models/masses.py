"""Formula masses [g/mol] and atom counts from chemical formulas.

Atomic weights come from the maintained ``periodictable`` package (2.x), which uses
the IUPAC/CIAAW *abridged* standard atomic weights of 2021 (Prohaska et al. 2022,
Pure Appl. Chem. 94, 573; DOI 10.1515/pac-2019-0603), with N and Ar set to their
atmospheric values. Examples: H 1.008, C 12.011, N 14.007, O 15.999, Ca 40.078.

Formulas are written as in the trade and the API: ``"CH3COOH"``, ``"Ca(OH)2"``,
``"SO4"``. A trailing ionic charge is accepted and ignored for the mass
(``"Ca2+"``, ``"NO3-"``, ``"CO3-2"``): the electrons' mass (0.00055 g/mol each) is
neglected, as every handbook does for ionic masses.
"""

from __future__ import annotations

import re
from functools import cache

import periodictable
from periodictable.core import Element

from models.errors import InputError

__all__ = ["ATOMIC_WEIGHTS_SOURCE", "split_charge", "formula_mass_g_mol", "atom_count", "atoms"]

#: Where the atomic weights come from (shown by the API beside every formula mass).
ATOMIC_WEIGHTS_SOURCE: str = (
    "IUPAC/CIAAW abridged standard atomic weights 2021 (Prohaska et al. 2022, "
    "Pure Appl. Chem. 94, 573), as shipped by the periodictable package "
    f"{periodictable.__version__}"
)

_ELEMENT = re.compile(r"[A-Z][a-z]?")


def split_charge(formula: str) -> tuple[str, int]:
    """Split an ion's name into formula and charge: ``"Ca2+"`` → ``("Ca", 2)``.

    Rules for plain text (there are no superscripts): a sign followed by a digit is the
    charge (``"CO3-2"``, also ``"SO4 2-"`` with a space); a lone trailing sign is ±1 and
    a digit in front of it is the charge only for a single element or after a bracket
    (``"Ca2+"``, ``"Fe3+"``), otherwise a subscript (``"NO3-"``, ``"NH4+"``); with two
    or more digits in front of the sign, the last one is the charge (``"SO42-"``).
    A formula without a sign has charge 0.
    """
    text = formula.strip()
    sign_digit = re.fullmatch(r"(.+?)\s*([+-])([1-9])", text)  # "CO3-2", "Ca+2"
    if sign_digit is not None:
        body, sign_text, digit = sign_digit.groups()
        return body.strip(), int(digit) * (1 if sign_text == "+" else -1)
    spaced = re.fullmatch(r"(.+?)\s+([1-9]?)([+-])", text)  # "SO4 2-", "Na +"
    if spaced is not None:
        body, digit, sign_text = spaced.groups()
        return body, int(digit or 1) * (1 if sign_text == "+" else -1)
    if not text.endswith(("+", "-")):
        return text, 0
    sign = 1 if text[-1] == "+" else -1
    body = text[:-1]
    trailing = re.search(r"\d+$", body)
    if trailing is None:
        return body, sign
    digits = trailing.group()
    stem = body[: trailing.start()]
    if len(digits) >= 2 and digits[-1] != "0":
        return body[:-1], sign * int(digits[-1])
    if len(digits) == 1 and (_ELEMENT.fullmatch(stem) or stem.endswith((")", "]"))):
        return stem, sign * int(digits)
    return body, sign


@cache
def _parse(formula: str) -> dict[str, int]:
    body, _ = split_charge(formula)
    not_formula = f"'{formula}' is not a chemical formula (write it like CH3COOH, Ca(OH)2 or SO4)"
    if not re.fullmatch(r"[A-Z(\[][A-Za-z0-9()\[\]]*", body):
        raise InputError(not_formula)
    try:
        parsed = periodictable.formula(body)
    except Exception as exc:  # the parser raises its own (pyparsing) exception types
        raise InputError(not_formula) from exc
    counts: dict[str, int] = {}
    for element, count in parsed.atoms.items():
        if not isinstance(element, Element) or element.number == 0:
            raise InputError(f"'{formula}' contains something other than chemical elements")
        if count != int(count) or count <= 0:
            raise InputError(f"'{formula}' must have whole, positive atom counts")
        counts[element.symbol] = counts.get(element.symbol, 0) + int(count)
    if not counts:
        raise InputError(f"'{formula}' is not a chemical formula")
    return counts


def atoms(formula: str) -> dict[str, int]:
    """Atoms per formula unit, e.g. ``atoms("Ca(OH)2") == {"Ca": 1, "O": 2, "H": 2}``."""
    return dict(_parse(formula))


@cache
def formula_mass_g_mol(formula: str) -> float:
    """Molar mass of ``formula`` [g/mol] from IUPAC 2021 abridged atomic weights.

    Raises InputError for a string that is not a formula of real elements.
    """
    counts = _parse(formula)
    return float(sum(periodictable.elements.symbol(sym).mass * n for sym, n in counts.items()))


def atom_count(formula: str, element: str) -> int:
    """Number of atoms of ``element`` (a symbol such as ``"N"``) per unit of ``formula`` [-]."""
    try:
        symbol = periodictable.elements.symbol(element).symbol
    except ValueError as exc:
        raise InputError(f"'{element}' is not a chemical element symbol") from exc
    return _parse(formula).get(symbol, 0)
