"""Reading system files (TOML) into a :class:`~eqbatch.spec.SystemSpec`.

::

    species = ["CH4", "H2O", "CO", "H2", "CO2", "N2"]
    P0 = 1.01325            # bar, standard pressure of the K data (default 1)
    check_balance = true    # optional
    condensable = ["H2O"]   # optional: what a dry basis leaves out (default: water)

    [phases]                # optional; unlisted species are gas
    # EtOH = "liquid"       # the liquid solution; "liquid:<name>" for another one
    # C = "solid"           # a pure species ("solid" or "pure_liquid")

    [formulas]              # optional explicit formulas for label-named species
    # EtOH = "C2H5OH"

    [[reactions]]
    label = "reforming"
    equation = "CH4 + H2O = CO + 3 H2"
    lnK = { a = 30.114, b = -26830.0 }   # ln K = a + b/T + c ln T + d T + e T^2

    [[reactions]]
    label = "shift"
    equation = "CO + H2O = CO2 + H2"
    K = 1.44                              # or lnK = ..., log10K = ...

Instead of K data, species may carry thermochemistry, and the reactions may
be generated (``reactions = "auto"``, with ``feed_species = ["CH4", "H2O"]``
to write each one in the direction it runs from that feed)::

    [species_data.H2O]
    source = "NIST Chemistry WebBook, Shomate"
    shomate = [{ T_min = 500, T_max = 1700, A = 30.092, B = 6.832514, C = 6.793435,
                 D = -2.53448, E = 0.082139, F = -250.881, G = 223.3967, H = -241.8264 }]
    # or nasa7 = { T_mid = 1000, low = [...7], high = [...7], T_min = 200, T_max = 3500 }
    # or cp_poly = { a = [a0, a1, a2, a3, a4], dHf = -241.8, S298 = 188.8 }
    # or maier_kelley = { a = 104.5, b = 21.9e-3, d = -25.9e5, dHf = -1207.6, S298 = 91.7 }
    # or tabulated = { T = [...], Cp = [...], H_rel = [...], S = [...], dHf = -241.8 }
    # P_ref = 1.0           # bar, standard pressure of these data (default 1)

A real gas (:mod:`eqbatch.realgas`) takes its model, its critical constants
(per species, or ``critical = "chemicals"`` in ``[gas]``) and optional
binary parameters (``"A-B"`` names a pair)::

    [gas]
    model = "peng-robinson"     # or "srk", "ideal"
    kij = { "H2-N2" = 0.0 }

    [critical.NH3]
    Tc = 405.4                  # K
    Pc = 113.53                 # bar
    omega = 0.256

A solution phase takes an activity model (:mod:`eqbatch.activity`), pairs
again as ``"A-B"``::

    [liquid_model.liquid]       # the phase: "liquid" or "liquid:<name>"
    model = "nrtl"              # or "wilson", "uniquac"
    a = { "EtOH-H2O" = 0.4, "H2O-EtOH" = 0.9 }
    b = { "EtOH-H2O" = 150.0 }  # K
    alpha = { "EtOH-H2O" = 0.3 }
    # uniquac: r = { EtOH = 2.1055, H2O = 0.92 }, q = { EtOH = 1.972, H2O = 1.40 }
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable
from types import ModuleType
from typing import Any

from eqbatch.activity import NRTL, UNIQUAC, Wilson
from eqbatch.definition import define
from eqbatch.errors import SystemDefinitionError, SystemFileError
from eqbatch.kdata import as_lnk_data
from eqbatch.spec import SystemSpec

_TOP_KEYS = {
    "species",
    "phases",
    "formulas",
    "reactions",
    "P0",
    "check_balance",
    "species_data",
    "thermo",
    "gas",
    "critical",
    "liquid_model",
    "condensable",
    "feed_species",
}
_REACTION_KEYS = {"label", "equation", "lnK", "K", "log10K"}


def _toml() -> ModuleType:
    """The TOML reader (the standard library's from Python 3.11, else tomli),
    loaded when a file is first read."""
    if sys.version_info >= (3, 11):
        import tomllib

        return tomllib
    import tomli  # pragma: no cover

    return tomli  # pragma: no cover


def _gas_tables(doc: dict[str, Any], fail: Callable[[str], SystemFileError]) -> dict[str, Any]:
    """``gas_model``, ``critical`` and ``kij`` from ``[gas]`` and ``[critical.<species>]``."""
    gas = doc.get("gas", {})
    if not isinstance(gas, dict) or set(gas) - {"model", "critical", "kij"}:
        raise fail('[gas] takes model = "peng-robinson" | "srk" | "ideal", critical = "chemicals" and kij')
    critical: Any = doc.get("critical")
    if "critical" in gas:
        if critical is not None or gas["critical"] != "chemicals":
            raise fail('[gas] critical = "chemicals" replaces the [critical.<species>] tables (give one)')
        critical = "chemicals"
    elif critical is not None and not (
        isinstance(critical, dict) and all(isinstance(v, dict) for v in critical.values())
    ):
        raise fail("[critical.<species>] tables hold Tc (K), Pc (bar) and omega")
    kij: dict[tuple[str, str], float] = {}
    table = gas.get("kij", {})
    if not isinstance(table, dict):
        raise fail('[gas] kij is a table of "A-B" = value')
    for key, value in table.items():
        pair = tuple(str(key).split("-"))
        if len(pair) != 2 or not isinstance(value, (int, float)):
            raise fail(f'[gas] kij: {key!r} must name two species as "A-B" with a number')
        kij[(pair[0], pair[1])] = float(value)
    return {"gas_model": gas.get("model"), "critical": critical, "kij": kij or None}


def _liquid_models(doc: dict[str, Any], fail: Callable[[str], SystemFileError]) -> dict[str, Any] | None:
    """``liquid_model`` from ``[liquid_model.<phase>]`` tables."""
    tables = doc.get("liquid_model")
    if tables is None:
        return None
    if not isinstance(tables, dict) or not all(isinstance(t, dict) for t in tables.values()):
        raise fail("[liquid_model.<phase>] tables hold model and its parameters")
    kinds = {
        "nrtl": (NRTL, {"a", "b", "alpha"}),
        "wilson": (Wilson, {"a", "b"}),
        "uniquac": (UNIQUAC, {"a", "b", "r", "q"}),
    }
    out: dict[str, Any] = {}
    for phase, table in tables.items():
        kind = str(table.get("model", "")).lower()
        if kind not in kinds:
            raise fail(
                f'[liquid_model.{phase}] model must be "nrtl", "wilson" or "uniquac"; '
                f"got {table.get('model')!r}"
            )
        cls, keys = kinds[kind]
        bad = set(table) - keys - {"model"}
        if bad:
            raise fail(f"[liquid_model.{phase}]: unknown key(s) {sorted(bad)}; valid are {sorted(keys)}")
        args: dict[str, Any] = {}
        for key in keys & set(table):
            values = table[key]
            if not isinstance(values, dict) or not all(isinstance(v, (int, float)) for v in values.values()):
                raise fail(f"[liquid_model.{phase}] {key} is a table of numbers")
            if key in ("r", "q"):
                args[key] = {str(k): float(v) for k, v in values.items()}
                continue
            pairs = {}
            for name, value in values.items():
                pair = tuple(str(name).split("-"))
                if len(pair) != 2:
                    raise fail(f'[liquid_model.{phase}] {key}: {name!r} must name two species as "A-B"')
                pairs[pair] = float(value)
            args[key] = pairs
        out[phase] = cls(**args)
    return out


def _thermo_source(doc: dict[str, Any], fail: Callable[[str], SystemFileError]) -> str | None:
    table = doc.get("thermo")
    if table is None:
        return None
    if not isinstance(table, dict) or set(table) - {"source"} or "source" not in table:
        raise fail('[thermo] takes one key, source = "chemicals"')
    return str(table["source"])


def read_spec(path: str | os.PathLike[str]) -> SystemSpec:
    """The checked description of the system in a TOML file.

    :meth:`ReactionSystem.from_toml <eqbatch.ReactionSystem.from_toml>` is
    the usual way to read one.

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    SystemSpec

    Raises
    ------
    SystemFileError
        The file is missing, unreadable, not TOML or has a bad key or value
        (the message names the file and the key).
    SystemDefinitionError
        The system is malformed (the message starts with the file's name).

    Examples
    --------
    >>> from importlib import resources
    >>> with resources.as_file(resources.files("eqbatch") / "data/reformer.toml") as path:
    ...     spec = read_spec(path)
    >>> spec.species, spec.P0
    (('CH4', 'H2O', 'CO', 'H2', 'CO2', 'N2'), 1.0)
    """
    name = os.fspath(path)
    tomllib = _toml()
    try:
        with open(name, "rb") as fh:
            doc = tomllib.load(fh)
    except FileNotFoundError:
        raise SystemFileError(f"{name}: no such file") from None
    except tomllib.TOMLDecodeError as err:
        raise SystemFileError(f"{name}: not valid TOML: {err}") from None
    except UnicodeDecodeError as err:
        raise SystemFileError(
            f"{name}: not UTF-8 text (TOML files are UTF-8): byte {err.object[err.start]:#04x} "
            f"at offset {err.start} cannot be decoded; save the file as UTF-8"
        ) from None
    except RecursionError:
        raise SystemFileError(f"{name}: not valid TOML: arrays or tables nested too deeply") from None
    except OSError as err:
        raise SystemFileError(f"{name}: cannot read: {err.strerror}") from None

    def fail(msg: str) -> SystemFileError:
        return SystemFileError(f"{name}: {msg}")

    unknown = set(doc) - _TOP_KEYS
    if unknown:
        raise fail(f"unknown key(s) {sorted(unknown)}; valid are {sorted(_TOP_KEYS)}")
    species = doc.get("species")
    if not isinstance(species, list) or not all(isinstance(s, str) for s in species):
        raise fail('\'species\' must be an array of names, e.g. species = ["CH4", "H2O"]')
    reactions = doc.get("reactions")
    species_data = doc.get("species_data")
    if species_data is not None and not isinstance(species_data, dict):
        raise fail("[species_data] must hold one table per species, e.g. [species_data.CH4]")
    auto = isinstance(reactions, str) and reactions.strip().lower() == "auto"
    tables: list[Any] = []
    if not auto:
        if not isinstance(reactions, list) or not reactions:
            raise fail("needs at least one [[reactions]] table with an 'equation' (or reactions = \"auto\")")
        tables = reactions
    pairs: list[tuple[str, str]] = []
    lnk: dict[str, Any] = {}
    for j, table in enumerate(tables):
        where = f"reactions[{j}]"
        if not isinstance(table, dict):
            raise fail(f"{where} must be a table")
        bad = set(table) - _REACTION_KEYS
        if bad:
            raise fail(f"{where}: unknown key(s) {sorted(bad)}; valid are {sorted(_REACTION_KEYS)}")
        if "equation" not in table or not isinstance(table["equation"], str):
            raise fail(f"{where}: missing 'equation' (a string such as \"CO + H2O = CO2 + H2\")")
        label = str(table.get("label", f"r{j + 1}"))
        pairs.append((label, table["equation"]))
        kinds = [k for k in ("lnK", "K", "log10K") if k in table]
        if len(kinds) > 1:
            raise fail(f"{where} ({label}): give only one of lnK, K, log10K")
        if kinds:
            try:
                lnk[label] = as_lnk_data(table[kinds[0]], label, kinds[0])
            except SystemDefinitionError as err:
                raise fail(f"{where}: {err}") from None
    for key in ("phases", "formulas"):
        if key in doc and not isinstance(doc[key], dict):
            raise fail(f"[{key}] must be a table of species = value")
    check_balance = doc.get("check_balance", True)
    if not isinstance(check_balance, bool):
        raise fail(f"check_balance must be true or false (a TOML boolean, unquoted), got {check_balance!r}")
    try:
        return define(
            species,
            "auto" if auto else pairs,
            phases=doc.get("phases"),
            formulas=doc.get("formulas"),
            P0=doc.get("P0", 1.0),
            check_balance=check_balance,
            lnK=lnk or None,
            species_data=species_data,
            thermo=_thermo_source(doc, fail),
            **_gas_tables(doc, fail),
            liquid_model=_liquid_models(doc, fail),
            condensable=doc.get("condensable"),
            feed_species=doc.get("feed_species"),
        )
    except SystemDefinitionError as err:
        raise type(err)(f"{name}: {err}") from None
