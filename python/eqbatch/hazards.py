"""The safety caution printed by the command line, naming the hazards of the
species a system actually holds.

The table covers common species of reaction-equilibrium work. Its classes
are the GHS hazard classes (UN Globally Harmonized System, as harmonised in
the EU CLP regulation, Annex VI, and printed on suppliers' safety data
sheets), written down from memory and reduced to one word each: flammable
(flammable gas, liquid or solid), toxic (acute toxicity, or specific target
organ toxicity on repeated exposure), corrosive (skin corrosion), oxidiser
(oxidising gas or liquid) and carcinogen. ``asphyxiant`` is the "simple
asphyxiant" of the US OSHA Hazard Communication Standard (2012): a gas that
displaces oxygen. The table is a prompt to read each species' safety data
sheet, not a substitute for it.
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping

from eqbatch.spec import SystemSpec

#: Hazard classes in the order the caution lists them.
KINDS = ("flammable", "toxic", "corrosive", "oxidiser", "carcinogen", "asphyxiant")

# fmt: off
#: Formula -> hazard classes (GHS, from memory; see the module notes). An
#: empty tuple means no GHS hazard class (water).
HAZARDS: dict[str, tuple[str, ...]] = {
    "H2": ("flammable", "asphyxiant"),
    "CH4": ("flammable", "asphyxiant"),
    "C2H6": ("flammable", "asphyxiant"),
    "C2H4": ("flammable", "asphyxiant"),
    "C2H2": ("flammable", "asphyxiant"),
    "C3H8": ("flammable", "asphyxiant"),
    "C3H6": ("flammable", "asphyxiant"),
    "C4H10": ("flammable",),
    "C8H18": ("flammable",),
    "C6H6": ("flammable", "carcinogen"),
    "C7H8": ("flammable",),
    "CO": ("flammable", "toxic"),
    "CO2": ("asphyxiant",),
    "N2": ("asphyxiant",),
    "Ar": ("asphyxiant",),
    "He": ("asphyxiant",),
    "Ne": ("asphyxiant",),
    "O2": ("oxidiser",),
    "O3": ("oxidiser", "toxic"),
    "H2O": (),
    "NH3": ("flammable", "toxic", "corrosive"),
    "H2S": ("flammable", "toxic"),
    "COS": ("flammable", "toxic"),
    "CS2": ("flammable", "toxic"),
    "HCN": ("flammable", "toxic"),
    "SO2": ("toxic", "corrosive"),
    "SO3": ("corrosive",),
    "NO": ("oxidiser", "toxic"),
    "NO2": ("oxidiser", "toxic", "corrosive"),
    "N2O": ("oxidiser",),
    "Cl2": ("oxidiser", "toxic"),
    "HCl": ("toxic", "corrosive"),
    "HF": ("toxic", "corrosive"),
    "H2SO4": ("corrosive",),
    "HNO3": ("oxidiser", "corrosive"),
    "NaOH": ("corrosive",),
    "KOH": ("corrosive",),
    "CH3OH": ("flammable", "toxic"),
    "C2H5OH": ("flammable",),
    "CH3OCH3": ("flammable",),
    "CH2O": ("flammable", "toxic", "corrosive", "carcinogen"),
    "CH3CHO": ("flammable", "carcinogen"),
    "HCOOH": ("flammable", "toxic", "corrosive"),
    "CH3COOH": ("flammable", "corrosive"),
}

#: Other spellings and common names of the species above.
ALIASES: dict[str, str] = {
    "hydrogen": "H2", "methane": "CH4", "ethane": "C2H6", "ethylene": "C2H4", "ethene": "C2H4",
    "acetylene": "C2H2", "propane": "C3H8", "propylene": "C3H6", "propene": "C3H6",
    "butane": "C4H10", "n-butane": "C4H10", "isobutane": "C4H10", "octane": "C8H18",
    "benzene": "C6H6", "toluene": "C7H8", "C6H5CH3": "C7H8", "carbon monoxide": "CO",
    "carbon dioxide": "CO2", "nitrogen": "N2", "argon": "Ar", "helium": "He", "oxygen": "O2",
    "ozone": "O3", "water": "H2O", "steam": "H2O", "ammonia": "NH3", "hydrogen sulfide": "H2S",
    "carbonyl sulfide": "COS", "carbon disulfide": "CS2", "hydrogen cyanide": "HCN",
    "sulfur dioxide": "SO2", "sulfur trioxide": "SO3", "nitric oxide": "NO",
    "nitrogen dioxide": "NO2", "nitrous oxide": "N2O", "chlorine": "Cl2",
    "hydrogen chloride": "HCl", "hydrogen fluoride": "HF", "sulfuric acid": "H2SO4",
    "nitric acid": "HNO3", "methanol": "CH3OH", "MeOH": "CH3OH", "ethanol": "C2H5OH",
    "EtOH": "C2H5OH", "CH3CH2OH": "C2H5OH", "dimethyl ether": "CH3OCH3", "DME": "CH3OCH3",
    "formaldehyde": "CH2O", "HCHO": "CH2O", "H2CO": "CH2O", "acetaldehyde": "CH3CHO",
    "formic acid": "HCOOH", "acetic acid": "CH3COOH",
}
# fmt: on

_LIMIT = "Equilibrium is a thermodynamic limit, not a reactor design."
_CLOSE = "High pressure and temperature add hazards: defer to local codes and licensed engineers."


def hazards_of(name: str, formula: str | None = None) -> tuple[str, ...] | None:
    """Hazard classes of a species by its name (a formula or a common name)
    or its given formula; None where the table does not know it."""
    for key in (name, formula):
        if not key:
            continue
        key = ALIASES.get(key, ALIASES.get(key.lower(), key))
        if key in HAZARDS:
            return HAZARDS[key]
    return None


def caution(system: SystemSpec | None = None, width: int = 92) -> str:
    """The caution for ``system`` (a :class:`~eqbatch.ReactionSystem`, or
    None for a general one): equilibrium is a limit, not a design; the
    hazards the table knows for its species, grouped by class; the species
    it does not know; and deference to local codes and licensed engineers.

    Examples
    --------
    >>> from eqbatch import ReactionSystem
    >>> print(caution(ReactionSystem(["N2", "H2", "NH3"], ["N2 + 3 H2 = 2 NH3"])))
    Equilibrium is a thermodynamic limit, not a reactor design. Hazards of this system's species
    (GHS classes, asphyxiant as OSHA's; from memory, so read each safety data sheet): flammable:
    H2, NH3; toxic: NH3; corrosive: NH3; asphyxiant: N2, H2.
    High pressure and temperature add hazards: defer to local codes and licensed engineers.
    """
    parts = [_LIMIT]
    if system is None:
        parts.append("Read the safety data sheet of every species.")
    else:
        given: Mapping[str, str | None] = system.given_formulas
        groups: dict[str, list[str]] = {kind: [] for kind in KINDS}
        unknown = []
        for name in system.species:
            found = hazards_of(name, given.get(name) if isinstance(given.get(name), str) else None)
            if found is None:
                unknown.append(name)
            for kind in found or ():
                groups[kind].append(name)
        listed = "; ".join(f"{kind}: {', '.join(names)}" for kind, names in groups.items() if names)
        if listed:
            parts.append(
                "Hazards of this system's species (GHS classes, asphyxiant as OSHA's; from memory, "
                f"so read each safety data sheet): {listed}."
            )
        if not listed and not unknown:
            parts.append("None of its species has a GHS hazard class in eqbatch's table.")
        if unknown:
            which = "its safety data sheet" if len(unknown) == 1 else "their safety data sheets"
            parts.append(f"eqbatch has no hazard data for {', '.join(unknown)}: read {which}.")
    text = textwrap.fill(" ".join(parts), width=width, break_long_words=False, break_on_hyphens=False)
    return f"{text}\n{_CLOSE}"
