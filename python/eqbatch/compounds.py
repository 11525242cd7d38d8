"""Which compound a species is in the ``chemicals`` package, and the
standard-state data that package has for it.

A species is named in one of three ways, and each is read for what it says:

* a compound name or registry number (``ethanol``, ``isobutane``, ``EtOH``,
  ``64-17-5``): looked up by name in the package's identifier database;
* a condensed structural formula (``C2H5OH``, ``CH3CH2OH``, ``CH3COOH``,
  ``(CH3)2CHOH``): read as a structure (heavy atoms, their hydrogens and
  which atoms are bonded; a group such as ``C2H5`` or ``C3H7`` stands for
  any group of that composition) and matched against the structures of the
  compounds of that molecular formula, so ``C2H5OH`` is ethanol, never its
  isomer dimethyl ether;
* a molecular formula, every element once (``C6H6``, ``C4H10``, ``H2O``).

A formula names a compound when exactly one compound with data fits it.
Where several do (``C4H10``: butane and isobutane; ``C3H7OH``: 1-propanol
and 2-propanol), nothing is guessed: the error lists them and says how to
choose.
"""

from __future__ import annotations

import functools
import itertools
import math
import re
from collections import Counter
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np

from eqbatch.equations import ELEMENTS
from eqbatch.errors import SystemDefinitionError
from eqbatch.speciesdata import CpPolynomial, MaierKelley, Tabulated

# Normal valences (bond-order sums) of the elements structural formulas use.
_VALENCES = {
    "H": (1,),
    "B": (3,),
    "C": (4,),
    "Si": (4,),
    "N": (3, 5),
    "P": (3, 5),
    "O": (2,),
    "S": (2, 4, 6),
    "Se": (2, 4, 6),
    "F": (1,),
    "Cl": (1,),
    "Br": (1,),
    "I": (1,),
}


@dataclass(frozen=True)
class Compound:
    """A compound of the identifier database and how a species led to it."""

    name: str
    cas: str
    formula: str  # molecular formula, Hill order
    smiles: str
    how: str

    def label(self) -> str:
        return f"{self.name} ({self.cas})"


# --- structures -------------------------------------------------------------------


@dataclass(frozen=True)
class _Graph:
    """Heavy atoms as (element, attached hydrogens) and their neighbours."""

    atoms: tuple[tuple[str, int], ...]
    neighbours: tuple[frozenset[int], ...]


_SMILES = re.compile(
    r"\[([^\]]*)\]|(Br|Cl|B|C|N|O|P|S|F|I)|(se|as|[bcnops])|([-=#$:/\\])|(\()|(\))|%(\d\d)|(\d)|(\.)"
)
_BRACKET = re.compile(
    r"^(\d*)([A-Z][a-z]?|se|as|[bcnops])(@{1,2}|@[A-Z]{2}\d+)?(?:H(\d*))?(?:[+-]+\d*)?(?::\d+)?$"
)
_BOND_ORDER = {"-": 1, "/": 1, "\\": 1, "=": 2, "#": 3, "$": 4, ":": 1}


def graph_from_smiles(smiles: str) -> _Graph:
    """The constitution (heavy atoms, hydrogens, connectivity) of a SMILES
    string, with hydrogens implied by the normal valences (OpenSMILES rules;
    an aromatic atom counts one more bond). Raises ``ValueError`` for what it
    does not read."""
    elements: list[str] = []
    hydrogens: list[int | None] = []  # None: implied by valence
    aromatic: list[bool] = []
    used: list[int] = []
    links: list[set[int]] = []
    branches: list[int | None] = []
    rings: dict[str, tuple[int, str | None]] = {}
    previous: int | None = None
    bond: str | None = None
    pos = 0

    def connect(a: int, b: int, symbol: str | None) -> None:
        order = _BOND_ORDER[symbol] if symbol else 1
        used[a] += order
        used[b] += order
        links[a].add(b)
        links[b].add(a)

    for match in _SMILES.finditer(smiles):
        if match.start() != pos:
            raise ValueError(f"cannot read SMILES {smiles!r}")
        pos = match.end()
        bracket, organic, arom, bond_symbol, opening, closing, ring2, ring1, dot = match.groups()
        if bracket is not None or organic or arom:
            if bracket is not None:
                parts = _BRACKET.match(bracket)
                if not parts:
                    raise ValueError(f"cannot read SMILES atom [{bracket}]")
                symbol = parts.group(2)
                h = 0 if parts.group(4) is None else int(parts.group(4) or 1)
            else:
                symbol, h = organic or arom, None
            elements.append(symbol.capitalize())
            hydrogens.append(h)
            aromatic.append(symbol.islower())
            used.append(0)
            links.append(set())
            atom = len(elements) - 1
            if previous is not None:
                connect(previous, atom, bond)
            previous, bond = atom, None
        elif bond_symbol:
            bond = bond_symbol
        elif opening:
            branches.append(previous)
        elif closing:
            if not branches:
                raise ValueError(f"unbalanced parenthesis in SMILES {smiles!r}")
            previous = branches.pop()
        elif ring2 or ring1:
            key = ring2 or ring1
            if previous is None:
                raise ValueError(f"ring closure without an atom in SMILES {smiles!r}")
            if key in rings:
                other, symbol = rings.pop(key)
                connect(other, previous, bond or symbol)
            else:
                rings[key] = (previous, bond)
            bond = None
        elif dot:
            previous = None
    if pos != len(smiles) or rings or branches or not elements:
        raise ValueError(f"cannot read SMILES {smiles!r}")
    for k, h in enumerate(hydrogens):
        if h is None:
            load = used[k] + (1 if aromatic[k] else 0)
            fits = [v for v in _VALENCES.get(elements[k], ()) if v >= load]
            hydrogens[k] = fits[0] - load if fits else 0
    # explicit hydrogen atoms ([2H], [H]) bonded to one heavy atom count as its hydrogens
    heavy = [k for k, e in enumerate(elements) if not (e == "H" and len(links[k]) == 1)]
    counts = [int(h or 0) for h in hydrogens]
    for k, e in enumerate(elements):
        if e == "H" and len(links[k]) == 1:
            counts[next(iter(links[k]))] += 1 + counts[k]
    index = {k: i for i, k in enumerate(heavy)}
    return _Graph(
        tuple((elements[k], counts[k]) for k in heavy),
        tuple(frozenset(index[n] for n in links[k] if n in index) for k in heavy),
    )


# --- condensed structural formulas ---------------------------------------------------

_CONDENSED = re.compile(r"([A-Z][a-z]?)(\d*)|(\()|\)(\d*)|([-=#])")

# A unit: ("atom", element, count, hydrogens) or ("group", units, count).
Unit = tuple


def _items(text: str) -> list[list]:
    """Atoms ``["atom", element, count]`` and parenthesised groups
    ``["group", items, count]`` of a formula such as ``CH3CH(OH)CH3``
    (bond marks ``-``, ``=``, ``#`` between them only separate them);
    ``ValueError`` if ``text`` is not one."""
    stack: list[list[list]] = [[]]
    pos = 0
    bond_open = True  # no bond mark first, twice, or before a closing parenthesis
    for match in _CONDENSED.finditer(text):
        if match.start() != pos:
            raise ValueError(text)
        pos = match.end()
        element, digits, opening, closing, bond = match.groups()
        if bond:
            if bond_open:
                raise ValueError(text)
            bond_open = True
            continue
        if element:
            if element not in ELEMENTS or digits.startswith("0"):
                raise ValueError(text)
            stack[-1].append(["atom", element, int(digits or 1)])
            bond_open = False
        elif opening:
            stack.append([])
            bond_open = False
        else:
            inner = stack.pop() if len(stack) > 1 else None
            if not inner or bond_open or (closing or "").startswith("0"):
                raise ValueError(text)
            stack[-1].append(["group", inner, int(closing or 1)])
    if pos != len(text) or len(stack) != 1 or not stack[0] or bond_open:
        raise ValueError(text)
    return stack[0]


def _attach_hydrogens(items: list[list]) -> list[Unit]:
    """Hydrogens belong to the heavy atom before them (``CH3``, ``OH``), or
    after them at the start (``HCOOH``, ``HOCH2CH2OH``)."""
    units: list[list] = []
    leading = 0
    for item in items:
        if item[0] == "atom" and item[1] == "H":
            if units and units[-1][0] == "atom":
                units[-1][3] += item[2]
            elif not units:
                leading += item[2]
            else:
                raise ValueError("hydrogen after a group")
        elif item[0] == "atom":
            units.append(["atom", item[1], item[2], leading])
            leading = 0
        else:
            units.append(["group", _attach_hydrogens(item[1]), item[2]])
            if leading:
                raise ValueError("hydrogen before a group")
    if leading or not units:
        raise ValueError("hydrogen without a heavy atom")
    return [tuple(u) for u in units]


def _element_counts(items: list[list], times: int = 1, into: Counter | None = None) -> Counter:
    into = Counter() if into is None else into
    for item in items:
        if item[0] == "atom":
            into[item[1]] += item[2] * times
        else:
            _element_counts(item[1], times * item[2], into)
    return into


def _is_molecular(text: str) -> bool:
    """Every element once, no parentheses or bond marks: ``C2H6O``, not ``C2H5OH``."""
    symbols = [m.group(1) for m in _CONDENSED.finditer(text)]
    return None not in symbols and len(symbols) == len(set(symbols))


# A node: ("atom", element, hydrogens) or ("blob", ((element, count), ...)).
# A reading: (nodes, edges, current node, nodes waiting for the next node).
_Reading = tuple


def _node(unit: Unit) -> tuple:
    _, element, count, h = unit
    if count == 1:
        return ("atom", element, h)
    return ("blob", tuple(sorted((Counter({element: count}) + Counter({"H": h})).items())))


def _fits_valence(nodes: tuple, edges: tuple, k: int) -> bool:
    if nodes[k][0] != "atom":
        return True
    _, element, h = nodes[k]
    degree = sum(k in e for e in edges)
    return h + degree <= max(_VALENCES[element])


def _add(reading: _Reading, sub_nodes: tuple, sub_edges: tuple) -> tuple[tuple, tuple, int]:
    nodes, edges, _, _ = reading
    offset = len(nodes)
    shifted = tuple((a + offset, b + offset) for a, b in sub_edges)
    return nodes + sub_nodes, edges + shifted, offset


def _walk(units: list[Unit], reading: _Reading) -> Iterator[_Reading]:
    """Every reading of ``units`` continuing ``reading``: each atom, group or
    composition group either continues the chain or hangs from the atom
    before it (before any atom: waits for the next one, as in
    ``(CH3)2CHOH``); readings that exceed a valence are dropped."""
    if not units:
        yield reading
        return
    unit, rest = units[0], units[1:]
    if unit[0] == "atom":
        pieces, copies = [((_node(unit),), (), 0)], 1
    else:
        sub = _walk(list(unit[1]), ((), (), None, ()))
        pieces, copies = [(n, e, end) for n, e, end, waiting in sub if not waiting], unit[2]
    # only a parenthesised group waits for the atom after it; a first atom starts the chain
    options = (True,) if unit[0] == "atom" and reading[2] is None else (True, False)
    for sub_nodes, sub_edges, sub_end in pieces:
        for chained in options:
            state, ok = reading, True
            for _ in range(copies):
                _, _, current, waiting = state
                nodes, edges, first = _add(state, sub_nodes, sub_edges)
                if current is not None:
                    links: tuple = ((current, first),)
                elif chained:
                    links, waiting = tuple((w, first) for w in waiting), ()
                else:
                    links = ()
                edges = edges + links
                ok = ok and all(_fits_valence(nodes, edges, k) for link in links for k in link)
                if chained:
                    state = (nodes, edges, first + sub_end, waiting)
                elif current is None:
                    state = (nodes, edges, None, waiting + (first,))
                else:
                    state = (nodes, edges, current, waiting)
            if ok:
                yield from _walk(rest, state)


def _merge_blobs(nodes: tuple, edges: tuple) -> tuple[list, list[tuple[Counter, Counter]]]:
    """Explicit atoms, their bonds, and the composition groups merged where
    adjacent, each with its composition and the atoms it is bonded to."""
    atoms = [k for k, n in enumerate(nodes) if n[0] == "atom"]
    blob_ids = [k for k, n in enumerate(nodes) if n[0] == "blob"]
    parent = {k: k for k in blob_ids}

    def root(k: int) -> int:
        while parent[k] != k:
            k = parent[k]
        return k

    for a, b in edges:
        if a in parent and b in parent:
            parent[root(a)] = root(b)
    groups: dict[int, tuple[Counter, Counter]] = {}
    for k in blob_ids:
        comp, _ = groups.setdefault(root(k), (Counter(), Counter()))
        comp.update(dict(nodes[k][1]))
    for a, b in edges:
        for blob, atom in ((a, b), (b, a)):
            if blob in parent and atom not in parent:
                groups[root(blob)][1][atom] += 1
    return atoms, list(groups.values())


def _valid(nodes: tuple, edges: tuple) -> bool:
    """Whether raising bond orders can give every explicit atom a normal valence."""
    atoms = [k for k, n in enumerate(nodes) if n[0] == "atom"]
    degree: Counter[int] = Counter()
    for a, b in edges:
        degree[a] += 1
        degree[b] += 1
    options = []
    for k in atoms:
        _, element, h = nodes[k]
        free = sorted({v - h - degree[k] for v in _VALENCES[element] if v - h - degree[k] >= 0})
        if not free:
            return False
        options.append(free)
    extra = [2] * len(edges)  # a bond can become at most triple

    def saturate(free: dict[int, int]) -> bool:
        atom = next((k for k, f in free.items() if f > 0), None)
        if atom is None:
            return True
        for e, (a, b) in enumerate(edges):
            if atom not in (a, b) or not extra[e]:
                continue
            other = b if a == atom else a
            if nodes[other][0] == "atom" and not free[other] > 0:
                continue
            extra[e] -= 1
            free[atom] -= 1
            if nodes[other][0] == "atom":
                free[other] -= 1
            done = saturate(free)
            extra[e] += 1
            free[atom] += 1
            if nodes[other][0] == "atom":
                free[other] += 1
            if done:
                return True
        return False

    return any(saturate(dict(zip(atoms, choice))) for choice in itertools.product(*options))


@functools.lru_cache(maxsize=256)
def structure_readings(text: str) -> tuple | None:
    """The readings of a condensed structural formula (``None`` if ``text``
    is not a formula or uses elements without a normal valence here)."""
    try:
        items = _items(text)
        units = _attach_hydrogens(items)
    except ValueError:
        return None
    if set(_element_counts(items)) - set(_VALENCES):
        return None
    out = []
    for nodes, edges, _, waiting in _walk(units, ((), (), None, ())):
        if waiting or not _valid(nodes, edges):
            continue
        atoms, blobs = _merge_blobs(nodes, edges)
        pattern = (
            tuple(nodes[k][1:] for k in atoms),
            frozenset((atoms.index(a), atoms.index(b)) for a, b in edges if a in atoms and b in atoms),
            tuple((comp, frozenset(atoms.index(k) for k in anchors)) for comp, anchors in blobs),
        )
        if pattern not in out:
            out.append(pattern)
    return tuple(out)


def _matches(pattern: tuple, graph: _Graph) -> bool:
    """Whether ``graph`` has the structure ``pattern``: its explicit atoms
    bonded exactly as written, and the rest split into groups of the
    written compositions, each bonded (once or more) to the atoms it is
    written beside and to no other."""
    atoms, bonds, blobs = pattern
    if len(atoms) + sum(n for comp, _ in blobs for e, n in comp.items() if e != "H") != len(graph.atoms):
        return False
    adjacent: dict[int, set[int]] = {k: set() for k in range(len(atoms))}
    for a, b in bonds:
        adjacent[a].add(b)
        adjacent[b].add(a)
    # fewest bonds of each atom: its written neighbours and one bond to each group beside it
    least = {k: len(adjacent[k]) + sum(k in anchors for _, anchors in blobs) for k in adjacent}
    open_ended = {k for k in adjacent if least[k] > len(adjacent[k])}
    order: list[int] = []
    for start in range(len(atoms)):  # breadth first, so neighbours are placed early
        if start in order:
            continue
        queue = [start]
        while queue:
            k = queue.pop(0)
            if k not in order:
                order.append(k)
                queue.extend(sorted(adjacent[k] - set(order)))
    image: dict[int, int] = {}

    def rest_fits() -> bool:
        taken = set(image.values())
        rest = [g for g in range(len(graph.atoms)) if g not in taken]
        seen: set[int] = set()
        pieces = []
        for g in rest:
            if g in seen:
                continue
            piece, stack = [], [g]
            seen.add(g)
            while stack:
                x = stack.pop()
                piece.append(x)
                for y in graph.neighbours[x]:
                    if y not in taken and y not in seen:
                        seen.add(y)
                        stack.append(y)
            comp: Counter[str] = Counter()
            for x in piece:
                element, h = graph.atoms[x]
                comp[element] += 1
                if h:
                    comp["H"] += h
            back = {v: k for k, v in image.items()}
            anchors = frozenset(back[y] for x in piece for y in graph.neighbours[x] if y in back)
            pieces.append((comp, anchors))

        def assign(i: int, left: list[tuple[Counter, frozenset]]) -> bool:
            if i == len(pieces):
                return all(not comp and not anchors for comp, anchors in left)
            comp, anchors = pieces[i]
            for j, (need, need_anchors) in enumerate(left):
                if all(need[e] >= n for e, n in comp.items()) and anchors <= blobs[j][1]:
                    left2 = list(left)
                    left2[j] = (need - comp, need_anchors - anchors)
                    if assign(i + 1, left2):
                        return True
            return False

        return assign(0, [(Counter(comp), anchors) for comp, anchors in blobs])

    def place(i: int) -> bool:
        if i == len(order):
            return rest_fits()
        k = order[i]
        for g, (element, h) in enumerate(graph.atoms):
            if g in image.values() or (element, h) != atoms[k]:
                continue
            bonds_g = len(graph.neighbours[g])
            if bonds_g < least[k] or (k not in open_ended and bonds_g != least[k]):
                continue
            if any((image[q] in graph.neighbours[g]) != (q in adjacent[k]) for q in image):
                continue
            image[k] = g
            if place(i + 1):
                return True
            del image[k]
        return False

    return place(0)


def fits_structure(smiles: str, readings: tuple) -> bool | None:
    """Whether a compound (by its SMILES) has one of the structures read from
    a formula; ``None`` when its SMILES cannot be read here.

    Examples
    --------
    >>> ethyl_alcohol = structure_readings("C2H5OH")
    >>> fits_structure("CCO", ethyl_alcohol), fits_structure("COC", ethyl_alcohol)  # ethanol, dimethyl ether
    (True, False)
    >>> propanol = structure_readings("C3H7OH")  # propyl or isopropyl
    >>> [fits_structure(s, propanol) for s in ("CCCO", "CC(C)O", "CCOC")]
    [True, True, False]
    """
    try:
        graph = graph_from_smiles(smiles)
    except ValueError:
        return None
    return any(_matches(pattern, graph) for pattern in readings)


# --- the identifier database ---------------------------------------------------------


@functools.lru_cache(maxsize=1)
def _compounds_by_formula() -> dict[str, list]:
    from chemicals.identifiers import get_pubchem_db

    index: dict[str, list] = {}
    for meta in get_pubchem_db():  # iterating loads the whole database once
        index.setdefault(meta.formula, []).append(meta)
    return index


def _compound(meta: Any, how: str) -> Compound:
    from chemicals.identifiers import int_to_CAS

    cas = int_to_CAS(meta.CAS) if isinstance(meta.CAS, int) else str(meta.CAS)
    return Compound(str(meta.common_name), cas, str(meta.formula), str(meta.smiles), how)


def _hill(counts: Counter) -> str:
    from chemicals.elements import atoms_to_Hill

    return atoms_to_Hill(dict(counts))


def _read_formula(text: str) -> tuple[str, tuple | None] | None:
    """``(Hill formula, structure readings or None for a molecular formula)``,
    or ``None`` if ``text`` is not a formula."""
    try:
        counts = _element_counts(_items(text))
    except ValueError:
        return None
    readings = None if _is_molecular(text) else structure_readings(text)
    return _hill(counts), (readings or None)


#: What a lookup found: ``("resolved", compound)``, or ``(kind, (text, Hill
#: formula, compounds))`` for ``"ambiguous"``, ``"nodata"`` and ``"none"``
#: (``None`` for a name that names nothing).
_Found = tuple[str, Compound | tuple[str, str, list[Compound]] | None]


def _by_formula(text: str, has_data: Callable[[str], bool]) -> _Found:
    read = _read_formula(text)
    if read is None:  # callers look a text up here only if it is a formula
        return "none", None
    hill, readings = read
    pool = [_compound(meta, "") for meta in _compounds_by_formula().get(hill, [])]
    fitting: list[tuple[Compound, bool | None]]
    if readings is None:
        fitting = [(c, True) for c in pool]
        how = f"the only compound of formula {text if _is_molecular(text) else hill} with data in chemicals"
    else:
        fitting = [(c, fit) for c in pool if (fit := fits_structure(c.smiles, readings)) is not False]
        how = f"structural formula {text}"
    with_data = sorted((c for c, _ in fitting if has_data(c.cas)), key=lambda c: c.name)
    if len(with_data) == 1:
        c = with_data[0]
        return "resolved", Compound(c.name, c.cas, c.formula, c.smiles, how)
    if with_data:
        return "ambiguous", (text, hill, with_data)
    known = sorted((c for c, fit in fitting if fit), key=lambda c: c.name)
    return ("nodata", (text, hill, known)) if known else ("none", (text, hill, pool))


def _by_name(text: str) -> _Found:
    from chemicals.elements import serialize_formula
    from chemicals.identifiers import CAS_from_any, get_pubchem_db, search_chemical

    try:
        meta = search_chemical(CAS_from_any(text))
    except Exception:  # chemicals raises ValueError and others for unknown names
        return "none", None
    try:
        as_formula = serialize_formula(text)
    except Exception:
        as_formula = None
    if as_formula == meta.formula and not get_pubchem_db().search_name(text):
        # the package read the text as a molecular formula and took one compound of that formula
        return "none", None
    return "resolved", _compound(meta, f"found by name {text!r}")


def _consistent(compound: Compound, text: str) -> bool:
    read = _read_formula(text)
    if read is None:
        return True
    hill, readings = read
    if hill != compound.formula:
        return False
    return readings is None or fits_structure(compound.smiles, readings) is not False


#: Radicals and atoms the identifier database lacks but whose data the package
#: holds (NIST-JANAF tables, formation data): Hill formula -> (name, CAS number,
#: SMILES). CAS registry numbers (outside reference).
_RADICALS = {
    "HO": ("hydroxyl radical", "3352-57-6", "[OH]"),
    "H": ("hydrogen atom", "12385-13-6", "[H]"),
    "O": ("oxygen atom", "17778-80-2", "[O]"),
    "N": ("nitrogen atom", "17778-88-0", "[N]"),
}


def _radical(texts: list[str], has_data: Callable[[str], bool]) -> Compound | None:
    """The radical or atom a formula names (see :data:`_RADICALS`), if the
    data source holds it."""
    for text in texts:
        read = _read_formula(text)
        if read is not None and read[1] is None and read[0] in _RADICALS:
            name, cas, smiles = _RADICALS[read[0]]
            if has_data(cas):
                return Compound(
                    name, cas, read[0], smiles, f"the radical or atom of formula {text}, by its CAS number"
                )
    return None


def identify(
    species: str,
    formula: str | None,
    has_data: Callable[[str], bool],
    wanted: str = "ideal-gas heat capacity, formation enthalpy and entropy",
) -> Compound:
    """The compound a species is, from its name and its formula (if given),
    name first (see the module notes); ``has_data(cas)`` says which
    compounds the data source can serve.

    Raises
    ------
    SystemDefinitionError
        No compound fits; more than one compound with data fits a formula
        (the message lists them); or the name and the formula disagree.
    """
    texts = [species] + ([formula] if formula and formula != species else [])
    found: Compound | None = None
    failures: list[tuple[str, tuple[str, str, list[Compound]]]] = []
    for text in texts:
        kind, detail = _by_formula(text, has_data) if _read_formula(text) else _by_name(text)
        if isinstance(detail, Compound):
            found = detail
            break
        if detail is not None:
            failures.append((kind, detail))
    prefix = f"thermo='chemicals': species {species!r}"
    if found is None:
        found = _radical(texts, has_data)
    if found is None:
        for kind in ("ambiguous", "nodata"):
            for k, detail in failures:
                if k != kind:
                    continue
                text, hill, compounds = detail
                listed = ", ".join(c.label() for c in compounds)
                if kind == "ambiguous":
                    example = compounds[0].name.replace(" ", "_")
                    raise SystemDefinitionError(
                        f"{prefix}: {text} fits more than one compound with data: {listed}. Choose one: "
                        f"name the species by its compound name with its formula (e.g. species "
                        f"{example!r} with formulas={{{example!r}: {hill!r}}}), or give species_data "
                        f"for {species!r}"
                    )
                raise SystemDefinitionError(
                    f"{prefix}: {text} is {listed}, for which chemicals has no {wanted}; "
                    f"give species_data for {species!r}"
                )
        raise SystemDefinitionError(
            f"thermo='chemicals': no compound found for species {species!r}"
            + (f" (formula {formula})" if formula else "")
        )
    for text in texts:
        if not _consistent(found, text):
            raise SystemDefinitionError(
                f"{prefix} is {found.label()}, formula {found.formula} ({found.how}), which does not fit "
                f"{text!r}; rename the species, correct its formula, or give species_data"
            )
    return found


# --- the data ---------------------------------------------------------------------------


#: Joules per calorie (thermochemical): Perry's Table 2-151 gives Cp in cal/(mol K).
_CAL = 4.184
#: The condensed states ``chemicals_data`` serves, by the phase a system gives.
_STATE = {"solid": "s", "pure_liquid": "l", "liquid": "l"}


def chemicals_data(
    name: str, formula: str | None = None, phase: str = "gas"
) -> CpPolynomial | MaierKelley | Tabulated:
    """Standard-state data of one species from the ``chemicals`` package.

    A gas (the default) has the ideal-gas data described below; a species in
    a condensed phase (``phase`` ``"solid"``, ``"pure_liquid"``, ``"liquid"``
    or ``"liquid:<name>"``) has the pure solid's or pure liquid's data (see
    :func:`condensed_chemicals_data`), never the gas's.

    The heat capacity comes from the source that reaches highest in
    temperature: the NIST-JANAF Thermochemical Tables (1998; rows from 200 K
    to 6000 K for many species, radicals included) where the package holds
    the compound's table, else the TRC ideal-gas correlation (usually to
    5000 K) sampled every 100 K, else the ideal-gas polynomial of Poling,
    Prausnitz and O'Connell, *The Properties of Gases and Liquids* (its
    table's validity range). Tables are :class:`Tabulated` data (a cubic
    spline through the rows, ``H`` and ``S`` its integrals). The formation
    enthalpy and entropy at 298.15 K are JANAF's with a JANAF table, else the
    package's first ranked source for each; all on a 1 bar standard state.

    The compound is found by name first, then from the formula: a condensed
    structural formula (``C2H5OH``) is read as the structure it writes, and a
    formula that fits more than one compound with data (``C4H10``) is refused
    with the candidates listed (see :func:`identify`).

    Parameters
    ----------
    name : str
        The species: a compound name, a CAS number or a formula.
    formula : str, optional
        Its formula, when the name is a label (``formulas={"EtOH": "C2H5OH"}``).

    Returns
    -------
    CpPolynomial or Tabulated
        Its ``source`` records the compound's name and registry number, how
        it was found, and where each value came from.

    Raises
    ------
    SystemDefinitionError
        The ``chemicals`` package is not installed, no compound fits, more
        than one does, or the compound lacks data.

    Examples
    --------
    >>> water = chemicals_data("H2O")
    >>> water.source.split(";")[0]
    'chemicals: water, CAS 7732-18-5 (the only compound of formula H2O with data in chemicals)'
    >>> round(water.dHf, 3), water.P_ref, water.range
    (-241.826, 1.0, (200.0, 6000.0))
    """
    kind = phase.split(":")[0]
    if kind != "gas":
        if kind not in _STATE:
            raise SystemDefinitionError(
                f"thermo='chemicals': species {name!r} has an unknown phase {phase!r}"
            )
        return condensed_chemicals_data(name, formula, _STATE[kind])
    try:
        from chemicals.heat_capacity import Cp_data_Poling, Cp_dict_JANAF_gas, TRC_gas_data, TRCCp
        from chemicals.reaction import Hfg, Hfg_methods, S0g, S0g_methods
    except ImportError:
        raise SystemDefinitionError(
            "thermo='chemicals' needs the chemicals package: pip install chemicals"
        ) from None

    def has_cp(cas: str) -> bool:
        return cas in Cp_dict_JANAF_gas or cas in TRC_gas_data.index or cas in Cp_data_Poling.index

    def has_data(cas: str) -> bool:
        return has_cp(cas) and bool(Hfg_methods(cas)) and bool(S0g_methods(cas))

    compound = identify(name, formula, has_data)
    cas = compound.cas
    what = f"species {name!r} = {compound.label()}"
    if not has_cp(cas):
        raise SystemDefinitionError(f"thermo='chemicals': no ideal-gas heat capacity for {what}")
    h_methods, s_methods = Hfg_methods(cas), S0g_methods(cas)
    if not h_methods or not s_methods:
        raise SystemDefinitionError(f"thermo='chemicals': no formation enthalpy or entropy for {what}")
    janaf = cas in Cp_dict_JANAF_gas and "JANAF" in h_methods and "JANAF" in s_methods
    h_method = "JANAF" if janaf else h_methods[0]
    s_method = "JANAF" if janaf else s_methods[0]
    hf = Hfg(cas, method=h_method)
    s0 = S0g(cas, method=s_method)
    head = f"chemicals: {compound.name}, CAS {cas} ({compound.how}); "
    tail = (
        f"dfH(298.15 K) = {hf / 1000:.3f} kJ/mol ({h_method}); "
        f"S(298.15 K) = {s0:.2f} J/mol/K ({s_method}); ideal gas at 1 bar"
    )
    if janaf:
        T_rows, cp_rows = (np.asarray(v, dtype=float) for v in Cp_dict_JANAF_gas[cas])
        keep = T_rows >= 200.0
        T_rows, cp_rows = T_rows[keep], cp_rows[keep]
        cp_text = f"Cp table of NIST-JANAF 1998 ({T_rows[0]:g}-{T_rows[-1]:g} K, spline); "
        return Tabulated.from_cp(T_rows, cp_rows, hf / 1000.0, s0, head + cp_text + tail, 1.0)
    poling_max = float(Cp_data_Poling.loc[cas]["Tmax"]) if cas in Cp_data_Poling.index else -math.inf
    trc_max = float(TRC_gas_data.loc[cas]["Tmax"]) if cas in TRC_gas_data.index else -math.inf
    if trc_max > poling_max:
        row = TRC_gas_data.loc[cas]
        coef = [float(row[f"a{i}"]) for i in range(8)]
        t_min, t_max = max(float(row["Tmin"]), 200.0), float(row["Tmax"])
        grid = np.unique(np.concatenate([[t_min, 298.15], np.arange(300.0, t_max, 100.0), [t_max]]))
        grid = grid[(grid >= t_min) & (grid <= t_max)]
        cp_rows = np.array([TRCCp(t, *coef) for t in grid])
        cp_text = f"TRC ideal-gas Cp correlation ({t_min:g}-{t_max:g} K, sampled every 100 K, spline); "
        return Tabulated.from_cp(grid, cp_rows, hf / 1000.0, s0, head + cp_text + tail, 1.0)
    row = Cp_data_Poling.loc[cas]
    a = tuple(float(row[k]) for k in ("a0", "a1", "a2", "a3", "a4"))
    t_min, t_max = float(row["Tmin"]), float(row["Tmax"])
    source = head + f"Cp/R polynomial of Poling, Prausnitz and O'Connell ({t_min:g}-{t_max:g} K); " + tail
    return CpPolynomial(a=a, dHf=hf / 1000.0, S298=s0, T_min=t_min, T_max=t_max, source=source, P_ref=1.0)


def condensed_chemicals_data(name: str, formula: str | None, state: str) -> MaierKelley | Tabulated:
    """Standard-state data of a pure solid (``state`` ``"s"``) or pure
    liquid (``"l"``) from the ``chemicals`` package.

    The heat capacity is the NIST-JANAF table of that state where the
    package holds one (a spline through its rows from 200 K up to the
    table's first transition above 298.15 K; graphite, lime, liquid water
    and liquid sulfur among them); else, for a liquid, the spline of
    Zabransky, Ruzicka and Majer (1996; constant-pressure, else averaged,
    else saturation heat capacity) sampled every 10 K, and for a solid the
    correlation of Perry's Table 2-151 (``a + b T + c / T^2 [+ d T^2]`` in
    cal/(mol K), its crystal form named in the source). The formation
    enthalpy and entropy at 298.15 K are the package's values for that
    state (JANAF's beside a JANAF table where it has them, else its first
    ranked source); an element in its reference state (graphite, rhombic
    sulfur, iron) has a formation enthalpy of zero by definition. A gas's
    data are never used for a condensed species.

    Raises
    ------
    SystemDefinitionError
        The package lacks a heat capacity, formation enthalpy or entropy of
        the compound in that state (give ``species_data``).

    Examples
    --------
    >>> graphite = condensed_chemicals_data("C", None, "s")
    >>> round(graphite.dHf, 3), round(float(graphite.cp(298.15)), 2)
    (0.0, 8.52)
    """
    try:
        from chemicals import reaction
        from chemicals.elements import periodic_table
        from chemicals.heat_capacity import (
            Cp_dict_JANAF_liquid,
            Cp_dict_JANAF_solid,
            Cp_dict_PerryI,
            zabransky_dict_const_s,
            zabransky_dict_iso_s,
            zabransky_dict_sat_s,
        )
    except ImportError:
        raise SystemDefinitionError(
            "thermo='chemicals' needs the chemicals package: pip install chemicals"
        ) from None
    word = {"s": "solid", "l": "liquid"}[state]
    janaf_tables = Cp_dict_JANAF_solid if state == "s" else Cp_dict_JANAF_liquid
    h_methods_of = reaction.Hfs_methods if state == "s" else reaction.Hfl_methods
    s_methods_of = reaction.S0s_methods if state == "s" else reaction.S0l_methods
    h_of = reaction.Hfs if state == "s" else reaction.Hfl
    s_of = reaction.S0s if state == "s" else reaction.S0l

    def janaf_rows(cas: str) -> tuple[np.ndarray, np.ndarray] | None:
        if cas not in janaf_tables:
            return None
        T_rows, cp_rows = (np.asarray(v, dtype=float) for v in janaf_tables[cas])
        # A table repeats the temperature of a transition (one row per form)
        # and may hold gaps: keep the stretch around 298.15 K between them.
        breaks = np.flatnonzero((np.diff(T_rows) <= 0) | ~np.isfinite(cp_rows[1:]))
        start = int(breaks[T_rows[breaks] < 298.15].max() + 1) if np.any(T_rows[breaks] < 298.15) else 0
        later = breaks[T_rows[breaks] >= 298.15]
        stop = int(later.min() + 1) if later.size else T_rows.size
        T_rows, cp_rows = T_rows[start:stop], cp_rows[start:stop]
        keep = (T_rows >= 200.0) & np.isfinite(cp_rows)
        T_rows, cp_rows = T_rows[keep], cp_rows[keep]
        if T_rows.size < 3 or not (T_rows[0] <= 298.15 <= T_rows[-1]):
            return None
        return T_rows, cp_rows

    def zabransky(cas: str) -> tuple[Any, str] | None:
        if state != "l":
            return None
        for table, kind in (
            (zabransky_dict_const_s, "constant-pressure"),
            (zabransky_dict_iso_s, "averaged"),
            (zabransky_dict_sat_s, "saturation"),
        ):
            model: Any = table.get(cas)  # a PiecewiseHeatCapacity
            if model is not None and model.Tmin <= 298.15 <= model.Tmax:
                return model, kind
        return None

    def perry(cas: str) -> dict[str, Any] | None:
        entries: dict[str, Any] = Cp_dict_PerryI.get(cas, {})
        return entries.get("c") if state == "s" else None

    def reference_element(cas: str) -> bool:
        element = next((e for e in periodic_table if e.CAS_standard == cas), None)
        return element is not None and element.phase == state

    def has_data(cas: str) -> bool:
        has_cp = janaf_rows(cas) is not None or perry(cas) is not None or zabransky(cas) is not None
        has_h = bool(h_methods_of(cas)) or reference_element(cas)
        return has_cp and has_h and bool(s_methods_of(cas))

    compound = identify(name, formula, has_data, f"{word} heat capacity, formation enthalpy and entropy")
    cas = compound.cas
    what = f"species {name!r} = {compound.label()} as a {word}"
    if not has_data(cas):
        raise SystemDefinitionError(
            f"thermo='chemicals': no {word} heat capacity, formation enthalpy and entropy for {what}; "
            f"give species_data for {name!r}"
        )
    rows = janaf_rows(cas)
    h_methods, s_methods = h_methods_of(cas), s_methods_of(cas)
    h_method = "JANAF" if rows is not None and "JANAF" in h_methods else (h_methods[0] if h_methods else None)
    s_method = "JANAF" if rows is not None and "JANAF" in s_methods else s_methods[0]
    if h_method is None:
        hf, h_text = 0.0, "0 (the element in its reference state)"
    else:
        hf = h_of(cas, method=h_method) / 1000.0
        h_text = f"{hf:.3f} kJ/mol ({h_method})"
    s0 = float(s_of(cas, method=s_method))
    head = f"chemicals: {compound.name}, CAS {cas} ({compound.how}), {word}; "
    tail = f"dfH(298.15 K) = {h_text}; S(298.15 K) = {s0:.2f} J/mol/K ({s_method}); at 1 bar"
    if rows is not None:
        T_rows, cp_rows = rows
        cp_text = f"Cp table of NIST-JANAF 1998, {word} ({T_rows[0]:g}-{T_rows[-1]:g} K, spline); "
        return Tabulated.from_cp(T_rows, cp_rows, hf, s0, head + cp_text + tail, 1.0)
    spline = zabransky(cas)
    if spline is not None:
        model, kind = spline
        t_min, t_max = float(model.Tmin), float(model.Tmax)
        grid = np.unique(
            np.concatenate([[t_min, 298.15, t_max], np.arange(10.0 * math.ceil(t_min / 10.0), t_max, 10.0)])
        )
        cp_rows = np.array([model.calculate(t) for t in grid])
        cp_text = (
            f"Cp spline of Zabransky et al. (1996), {kind} ({t_min:g}-{t_max:g} K, sampled every 10 K); "
        )
        return Tabulated.from_cp(grid, cp_rows, hf, s0, head + cp_text + tail, 1.0)
    entry = perry(cas)
    assert entry is not None  # has_data said so
    form = f", {entry['Subphase']}" if entry.get("Subphase") else ""
    t_min, t_max = float(entry["Tmin"]), float(entry["Tmax"])
    cp_text = f"Cp correlation of Perry's Table 2-151{form} ({t_min:g}-{t_max:g} K); "
    return MaierKelley(
        a=_CAL * float(entry["Const"]),
        b=_CAL * float(entry["Lin"]),
        c=_CAL * float(entry["Quad"]),
        d=_CAL * float(entry["Quadinv"]),
        dHf=hf,
        S298=s0,
        T_min=t_min,
        T_max=t_max,
        source=head + cp_text + tail,
        P_ref=1.0,
    )
