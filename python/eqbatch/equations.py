"""Reading reaction equations and chemical formulas, checking that reactions
between formulas balance, and generating an independent reaction set from
formulas.

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
from math import lcm

import numpy as np

from eqbatch.errors import AtomBalanceError, EquationSyntaxError, SystemDefinitionError, UnknownSpeciesError

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

    Parameters
    ----------
    text : str
        Element symbols with optional counts (``CH3OH``, ``C2H5OH``).

    Returns
    -------
    dict of str to int, or None
        Atoms per element, in the order first written.

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

    Parameters
    ----------
    equation : str
        ``<side> = <side>`` (or ``<=>``); a side is terms joined by ``+``, a
        term an optional coefficient (``3``, ``0.5``, ``1/2``) and a species.
    species : sequence of str
        The species the equation may name.
    label : str
        The reaction's label (for messages).

    Returns
    -------
    dict of str to float
        Net coefficient of every species in the equation (a species on both
        sides keeps its net coefficient; one that cancels is left out).

    Raises
    ------
    EquationSyntaxError
        No ``=``/``<=>``, more than one, an unreadable term, a coefficient
        outside 1e-6 to 1e6, or an equation that changes nothing.
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
    between chemical formulas does not conserve.

    Reactions involving a species without a formula are not checked.

    Parameters
    ----------
    coefficients : mapping species -> float
        As :func:`parse_equation` gives them.
    formulas : mapping species -> element counts or None
    label, equation : str
        The reaction (for the message).

    Raises
    ------
    AtomBalanceError
        An element is not conserved (within 1e-9 relative).

    Examples
    --------
    >>> formulas = {name: parse_formula(name) for name in ("N2", "H2", "NH3")}
    >>> check_atom_balance({"N2": -1.0, "H2": -3.0, "NH3": 2.0}, formulas, "r1", "N2 + 3 H2 = 2 NH3")
    >>> check_atom_balance({"N2": -1.0, "H2": -1.0, "NH3": 2.0}, formulas, "r1", "N2 + H2 = 2 NH3")
    Traceback (most recent call last):
    ...
    eqbatch.errors.AtomBalanceError: reaction 'r1' (N2 + H2 = 2 NH3) does not balance in H: 2 on the left, ...
    """
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


def element_matrix(
    species: Sequence[str], formulas: Mapping[str, dict[str, int] | None]
) -> tuple[list[str], np.ndarray]:
    """Elements and the (E, S) element-count matrix of species with formulas.

    Parameters
    ----------
    species : sequence of str
    formulas : mapping species -> element counts or None
        As :func:`parse_formula` gives them.

    Returns
    -------
    elements : list of str
        In alphabetical order.
    A : ndarray, shape (E, S)
        ``A[e, s]``: atoms of element ``e`` in species ``s``.

    Raises
    ------
    SystemDefinitionError
        A species has no formula.

    Examples
    --------
    >>> sp = ["CO", "H2O", "CO2", "H2"]
    >>> elements, A = element_matrix(sp, {s: parse_formula(s) for s in sp})
    >>> elements, A.astype(int).tolist()
    (['C', 'H', 'O'], [[1, 0, 1, 0], [0, 2, 0, 2], [1, 1, 2, 0]])
    """
    counts = _counts_of(species, formulas)
    elements = sorted({e for s in species for e in counts[s]})
    A = np.array([[counts[s].get(e, 0) for s in species] for e in elements], dtype=float)
    return elements, A


def _counts_of(
    species: Sequence[str], formulas: Mapping[str, dict[str, int] | None]
) -> dict[str, dict[str, int]]:
    """The element counts of every species, or SystemDefinitionError naming those without."""
    counts = {s: formulas.get(s) for s in species}
    missing = [s for s, c in counts.items() if c is None]
    if missing:
        raise SystemDefinitionError(
            f"reactions='auto' needs a chemical formula for every species; none for {', '.join(missing)}"
        )
    return {s: c for s, c in counts.items() if c is not None}


def independent_reactions(species: Sequence[str], formulas: Mapping[str, dict[str, int] | None]) -> list[str]:
    """A set of ``S - rank(A)`` independent reactions among ``species``.

    The reactions have small integer coefficients: the formation of each
    non-component species from the components (the species with the fewest
    atoms that span the elements), in exact rational arithmetic.

    Parameters
    ----------
    species : sequence of str
    formulas : mapping species -> element counts
        As :func:`parse_formula` gives them; every species needs one.

    Returns
    -------
    list of str
        Equations, one per non-component species, in the order of ``species``.

    Raises
    ------
    SystemDefinitionError
        A species has no formula.

    Examples
    --------
    >>> sp = ["CH4", "H2O", "CO", "H2", "CO2"]
    >>> independent_reactions(sp, {s: parse_formula(s) for s in sp})
    ['CO + 3 H2 = CH4 + H2O', 'CO + H2O = CO2 + H2']
    """
    counts = _counts_of(species, formulas)
    _, A = element_matrix(species, formulas)
    rows = [[Fraction(int(v)) for v in row] for row in A]
    pivots: list[int] = []
    r = 0
    # Components: the simplest species (fewest atoms) that span the elements,
    # so the reactions read as the formation of the larger species from them.
    by_size = sorted(range(len(species)), key=lambda j: (sum(counts[species[j]].values()), j))
    for col in by_size:
        pivot = next((i for i in range(r, len(rows)) if rows[i][col] != 0), None)
        if pivot is None:
            continue
        rows[r], rows[pivot] = rows[pivot], rows[r]
        inv = 1 / rows[r][col]
        rows[r] = [v * inv for v in rows[r]]
        for i in range(len(rows)):
            if i != r and rows[i][col] != 0:
                f = rows[i][col]
                rows[i] = [a - f * b for a, b in zip(rows[i], rows[r])]
        pivots.append(col)
        r += 1
        if r == len(rows):
            break
    equations = []
    for j, name in enumerate(species):
        if j in pivots:
            continue
        # species j = sum_k rows[k][j] * component_k
        coef = {species[p]: rows[k][j] for k, p in enumerate(pivots)}
        scale = lcm(*[c.denominator for c in coef.values()], 1)
        left = {s: c * scale for s, c in coef.items() if c > 0}
        right = {name: Fraction(scale)} | {s: -c * scale for s, c in coef.items() if c < 0}
        equations.append(f"{_side(left)} = {_side(right)}")
    return equations


#: Standard atomic weights, g/mol (IUPAC/CIAAW abridged standard atomic
#: weights, 2021; conventional values where an interval is given; from
#: memory): the molar masses of
#: species from their formulas, for feeds given as masses.
ATOMIC_WEIGHTS = {
    "H": 1.008, "He": 4.0026, "Li": 6.94, "Be": 9.0122, "B": 10.81, "C": 12.011, "N": 14.007,
    "O": 15.999, "F": 18.998, "Ne": 20.180, "Na": 22.990, "Mg": 24.305, "Al": 26.982, "Si": 28.085,
    "P": 30.974, "S": 32.06, "Cl": 35.45, "Ar": 39.95, "K": 39.098, "Ca": 40.078, "Ti": 47.867,
    "V": 50.942, "Cr": 51.996, "Mn": 54.938, "Fe": 55.845, "Co": 58.933, "Ni": 58.693, "Cu": 63.546,
    "Zn": 65.38, "Br": 79.904, "Kr": 83.798, "Mo": 95.95, "Ag": 107.87, "Sn": 118.71, "I": 126.90,
    "Xe": 131.29, "Pt": 195.08, "Au": 196.97, "Hg": 200.59, "Pb": 207.2,
}  # fmt: skip


def molar_mass(counts: Mapping[str, float] | None) -> float | None:
    """The molar mass (kg/mol) of a formula's element counts, from
    :data:`ATOMIC_WEIGHTS`; None without a formula or for an element not
    in the table.

    Examples
    --------
    >>> round(molar_mass(parse_formula("CH4")) * 1000, 3)  # g/mol
    16.043
    """
    if not counts or any(e not in ATOMIC_WEIGHTS for e in counts):
        return None
    return sum(ATOMIC_WEIGHTS[e] * n for e, n in counts.items()) / 1000.0


def cone_directions(stoich: np.ndarray, not_fed: np.ndarray, which: np.ndarray | None = None) -> np.ndarray:
    """The sign of each reaction's extent at equilibrium (+1 forward, -1
    backward) from any feed that lacks the species ``not_fed`` ((S,) bool)
    and holds the rest, where the stoichiometry alone fixes it; NaN where
    it does not. ``which`` ((R,) bool) limits the reactions examined.

    Every species such a feed can make is present at an ideal-gas
    equilibrium, so the extents lie in the open cone where each species not
    fed has ``(nu^T xi)_i > 0``. Where that cone lies on one side of ``xi_j
    = 0`` (a linear programme: the smallest ``xi_j`` with ``(nu^T xi)_i >=
    1`` on those species is positive, or the largest negative), reaction
    ``j`` runs that way whatever its K.

    Examples
    --------
    >>> nu = np.array([[-1.0, -1.0, 1.0, 3.0, 0.0], [0.0, -1.0, -1.0, 1.0, 1.0]])  # CH4 H2O CO H2 CO2
    >>> cone_directions(nu, np.array([False, False, True, True, True])).tolist()  # methane and steam fed
    [1.0, 1.0]
    """
    from scipy.optimize import linprog

    n_reactions = stoich.shape[0]
    out = np.full(n_reactions, np.nan)
    if not np.any(not_fed):
        return out
    a_ub = -stoich[:, not_fed].T  # (nu^T xi)_i >= 1 as A_ub xi <= b_ub
    b_ub = -np.ones(int(np.sum(not_fed)))
    bounds = [(None, None)] * n_reactions
    for j in range(n_reactions) if which is None else np.flatnonzero(which):
        c = np.zeros(n_reactions)
        for sign in (1.0, -1.0):
            c[j] = sign
            lp = linprog(c, A_ub=a_ub, b_ub=b_ub, bounds=bounds, method="highs")
            # (min xi_j > 0: forward; max xi_j < 0, i.e. min -xi_j > 0: backward;
            # the >= 1 constraints make a real bound of order 1, far above the
            # solver's feasibility tolerance, about 1e-7)
            if lp.status == 0 and lp.fun > 1e-6:
                out[j] = sign
                break
    return out


def oriented_reactions(
    equations: Sequence[str], species: Sequence[str], feed_species: Sequence[str]
) -> list[str]:
    """``equations`` each written in the direction it runs from a feed of
    ``feed_species`` (see :func:`cone_directions`); one whose direction the
    feed does not fix stays as it is.

    Examples
    --------
    >>> sp = ["CH4", "H2O", "CO", "H2", "CO2"]
    >>> oriented_reactions(["CO + 3 H2 = CH4 + H2O", "CO + H2O = CO2 + H2"], sp, ["CH4", "H2O"])
    ['CH4 + H2O = CO + 3 H2', 'CO + H2O = CO2 + H2']
    """
    unknown = [s for s in feed_species if s not in species]
    if unknown:
        raise UnknownSpeciesError(f"feed_species names no species of the system: {', '.join(unknown)}")
    stoich = np.zeros((len(equations), len(species)))
    for j, equation in enumerate(equations):
        for name, c in parse_equation(equation, species, f"r{j + 1}").items():
            stoich[j, list(species).index(name)] = c
    reactive = np.any(stoich != 0, axis=0)
    not_fed = reactive & ~np.isin(np.array(species), list(feed_species))
    directions = cone_directions(stoich, not_fed)
    out = []
    for equation, direction in zip(equations, directions):
        left, right = (side.strip() for side in equation.split("="))
        out.append(f"{right} = {left}" if direction == -1.0 else equation)
    return out


def generated_labels(equations: Sequence[str]) -> list[str]:
    """Labels for generated equations from their species: the reactants
    joined by ``_`` (``CH4_H2O``: labels name columns such as
    ``lnK_CH4_H2O``, so they keep to letters, digits and ``_``), with
    ``_to_`` and the products where two reactions share reactants.

    Examples
    --------
    >>> generated_labels(["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"])
    ['CH4_H2O', 'CO_H2O']
    >>> generated_labels(["CH4 + H2O = CO + 3 H2", "CH4 + 2 H2O = CO2 + 4 H2"])
    ['CH4_H2O_to_CO_H2', 'CH4_H2O_to_CO2_H2']
    """

    def names(side: str) -> str:
        return "_".join(re.sub(r"[^A-Za-z0-9_]", "_", term.split()[-1]) for term in side.split(" + "))

    sides = [[names(side.strip()) for side in equation.split("=")] for equation in equations]
    short = [left for left, _ in sides]
    labels = [left if short.count(left) == 1 else f"{left}_to_{right}" for left, right in sides]
    labels = [label if label[:1].isalpha() or label[:1] == "_" else f"r_{label}" for label in labels]
    return [label if labels.count(label) == 1 else f"{label}_{k + 1}" for k, label in enumerate(labels)]


def _side(terms: Mapping[str, Fraction]) -> str:
    """One side of a generated equation: ``CO + 3 H2``."""
    return " + ".join(f"{'' if c == 1 else str(c) + ' '}{s}" for s, c in terms.items() if c != 0)
