"""Reading reaction equations and chemical formulas.

An equation is ``<side> = <side>`` (``<=>`` also accepted); a side is terms
joined by ``+``; a term is an optional coefficient (``3``, ``0.5``, ``1/2``)
followed by a species name. A species appearing on both sides keeps its net
coefficient. Chemical formulas are element symbols with optional counts
(``CH3OH``, ``C2H5OH``, ``NH3``); anything else (``EtOH``, ``n-C4H10``,
``lump1``) is a label and is not atom-checked.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from fractions import Fraction

from eqbatch.errors import AtomBalanceError, EquationSyntaxError, UnknownSpeciesError

# fmt: off
ELEMENTS = frozenset("""
H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn
Ga Ge As Se Br Kr Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La
Ce Pr Nd Pm Sm Eu Gd Tb Dy Ho Er Tm Yb Lu Hf Ta W Re Os Ir Pt Au Hg Tl Pb Bi Po
At Rn Fr Ra Ac Th Pa U Np Pu Am Cm Bk Cf Es Fm Md No Lr Rf Db Sg Bh Hs Mt Ds Rg
Cn Nh Fl Mc Lv Ts Og D T
""".split())
# fmt: on

_ARROW = re.compile(r"\s*(?:<=>|=)\s*")
_COEF = re.compile(r"^(\d+/\d+|\d+(?:\.\d*)?(?:[eE][-+]?\d+)?|\.\d+)\s*(.+)$")
_FORMULA_TOKEN = re.compile(r"([A-Z][a-z]?)(\d*)")


def parse_formula(text: str) -> dict[str, int] | None:
    """Element counts of a plain chemical formula, or ``None`` if ``text``
    is not one (a label such as ``EtOH`` or ``n-C4H10``).

    Examples
    --------
    >>> parse_formula("CH3OH")
    {'C': 1, 'H': 4, 'O': 1}
    >>> parse_formula("EtOH") is None
    True
    """
    pos = 0
    counts: dict[str, int] = {}
    for match in _FORMULA_TOKEN.finditer(text):
        if match.start() != pos:
            return None
        symbol, digits = match.groups()
        if symbol not in ELEMENTS or digits.startswith("0"):
            return None
        counts[symbol] = counts.get(symbol, 0) + (int(digits) if digits else 1)
        pos = match.end()
    if pos != len(text) or not counts:
        return None
    return counts


#: Stoichiometric coefficients accepted, by magnitude. Beyond them float64
#: cannot hold a reaction's amounts and ln Q together (1e300 A = B, or 1e-7 A
#: = B, whose extent would reach 1e7 per mol of A): scale the equation.
COEFFICIENT_RANGE = (1e-6, 1e6)


def _parse_coefficient(text: str) -> Fraction:
    """The coefficient as written, exactly (``2.0000004`` is not ``2``)."""
    if "/" in text:
        num, den = text.split("/")
        if int(den) == 0:
            raise ZeroDivisionError
        return Fraction(int(num), int(den))
    value, (lo, hi) = float(text), COEFFICIENT_RANGE
    # Out of range: a stand-in that the caller refuses, naming the text as
    # written (the exact value of "1e999999999" would take gigabytes).
    if value > hi:
        return Fraction(2 * int(hi))
    if value < lo:
        positive = any(digit in "123456789" for digit in text.lower().partition("e")[0])
        return Fraction(lo) / 2 if positive else Fraction(0)
    return Fraction(text)


def _check_coefficient(coef: Fraction, written: str, name: str, label: str, net: bool = False) -> None:
    lo, hi = COEFFICIENT_RANGE
    if coef <= 0 and not net:
        raise EquationSyntaxError(f"reaction {label!r}: coefficient of {name!r} must be positive")
    if not lo <= abs(coef) <= hi:
        kind, hint = (
            ("net coefficient", f"{name!r} is on both sides and nearly cancels")
            if net
            else ("coefficient", "scale the equation (divide or multiply every coefficient alike)")
        )
        raise EquationSyntaxError(
            f"reaction {label!r}: {kind} {written} of {name!r} is outside the accepted magnitudes "
            f"{lo:g} to {hi:g}; {hint}"
        )


def _split_terms(side: str, known: set[str]) -> list[str]:
    side = side.strip()
    if not side:
        return []
    terms = [t.strip() for t in re.split(r"\s\+\s", side)]
    out: list[str] = []
    for term in terms:
        # "CH4+H2O" without spaces: split further unless the whole thing is a
        # species name (ions such as "Na+" keep their plus).
        if "+" in term and _term_species(term) not in known:
            out.extend(t.strip() for t in term.split("+") if t.strip())
        else:
            out.append(term)
    return out


def _term_species(term: str) -> str:
    match = _COEF.match(term)
    return match.group(2).strip() if match else term


def parse_equation(equation: str, species: Sequence[str], label: str) -> dict[str, float]:
    """Net stoichiometric coefficients (products positive) of ``equation``.

    Raises
    ------
    EquationSyntaxError
        No ``=``/``<=>``, more than one, or an unreadable term.
    UnknownSpeciesError
        A term names a species that is not in ``species``.

    Examples
    --------
    >>> parse_equation("CH4 + H2O = CO + 3 H2", ["CH4", "H2O", "CO", "H2"], "r1")
    {'CH4': -1.0, 'H2O': -1.0, 'CO': 1.0, 'H2': 3.0}
    """
    if not isinstance(equation, str):
        raise EquationSyntaxError(f"reaction {label!r}: equation must be a string, got {equation!r}")
    sides = _ARROW.split(equation.strip())
    if len(sides) != 2:
        raise EquationSyntaxError(
            f"reaction {label!r}: {equation!r} must have exactly one '=' or '<=>' "
            "between reactants and products"
        )
    known = set(species)
    net: dict[str, Fraction] = {}
    for sign, side in ((-1, sides[0]), (1, sides[1])):
        for term in _split_terms(side, known):
            if term in known:
                coef, name, written = Fraction(1), term, "1"
            else:
                match = _COEF.match(term)
                if not match:
                    raise UnknownSpeciesError(
                        f"reaction {label!r}: {term!r} is not a species of this system "
                        f"(species are {', '.join(species)})"
                    )
                try:
                    coef = _parse_coefficient(match.group(1))
                except (ValueError, ZeroDivisionError):
                    raise EquationSyntaxError(
                        f"reaction {label!r}: bad coefficient {match.group(1)!r} in {term!r}"
                    ) from None
                name, written = match.group(2).strip(), match.group(1)
                if name not in known:
                    raise UnknownSpeciesError(
                        f"reaction {label!r}: {name!r} is not a species of this system "
                        f"(species are {', '.join(species)})"
                    )
            _check_coefficient(coef, written, name, label)
            net[name] = net.get(name, Fraction(0)) + sign * coef
    for name, c in net.items():
        if c != 0:
            _check_coefficient(c, f"{float(c):g}", name, label, net=True)
    result = {name: float(c) for name, c in net.items() if c != 0}
    if not result:
        raise EquationSyntaxError(f"reaction {label!r}: {equation!r} changes nothing")
    return result


def check_atom_balance(
    coefficients: Mapping[str, float],
    formulas: Mapping[str, dict[str, int] | None],
    label: str,
    equation: str,
) -> None:
    """Raise :class:`AtomBalanceError` naming the first element that a reaction
    between chemical formulas does not conserve. Reactions involving a species
    without a formula are not checked."""
    if any(formulas.get(name) is None for name in coefficients):
        return
    totals: dict[str, tuple[float, float]] = {}
    for name, coef in coefficients.items():
        formula = formulas[name]
        assert formula is not None
        for element, count in formula.items():
            left, right = totals.get(element, (0.0, 0.0))
            if coef < 0:
                left += -coef * count
            else:
                right += coef * count
            totals[element] = (left, right)
    for element, (left, right) in totals.items():
        if abs(left - right) > 1e-9 * max(1.0, left, right):
            raise AtomBalanceError(
                f"reaction {label!r} ({equation}) does not balance in {element}: "
                f"{left:g} on the left, {right:g} on the right. If these names are labels "
                "rather than chemical formulas, pass check_balance=False or give formulas="
            )
