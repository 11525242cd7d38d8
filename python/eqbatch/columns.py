"""The names of the columns of result tables, in one place.

A result table (``result.to_pandas()``, ``result.to_arrow()``, a Parquet
sweep's output) has the inputs ``feed_<species>``, ``P_bar``, ``T_K`` and
``lnK_<label>``, then the outputs ``n_<species>``, ``y_<species>``,
``extent_<label>``, ``conversion_<species>`` (sweeps: the fed species that
react), ``status``, ``status_name`` and ``iterations``; systems with pure condensed species
add ``present_<species>`` and ``activity_<species>`` for each of them;
systems whose gas holds a condensable species (water by default) add the
dry-basis ``ydry_<species>``.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np

from eqbatch import _core
from eqbatch.errors import CaseInputError
from eqbatch.spec import PURE_KINDS, SystemSpec

FEED = "feed_"
#: A sweep input: moles of water fed per mole of carbon in the other fed
#: species (the steam-to-carbon ratio), instead of a feed_H2O column.
STEAM_TO_CARBON = "S_C"
LNK = "lnK_"
PRESSURE = "P_bar"
TEMPERATURE = "T_K"
STATUS = "status"
#: The status's name beside its code (dictionary-encoded in Parquet, a
#: categorical in pandas).
STATUS_NAME = "status_name"
ITERATIONS = "iterations"
#: Optional sweep inputs: an energy-balance row (adiabatic, or a heat duty in kJ
#: per case), the feed's temperature, and a per-reaction approach (K).
ADIABATIC = "adiabatic"
DUTY = "duty_kJ"
T_IN = "T_in_K"
H_IN = "H_in_kJ"
APPROACH = "approach_"
#: Energy outputs of sweeps whose species all have data: the equilibrium
#: temperature (with energy-balance inputs), the outlet's enthalpy, the heat the
#: reactor takes (kJ per case) and each reaction's standard enthalpy (J/mol).
T_OUT = "T_out_K"
H_OUT = "H_out_kJ"
HEAT = "heat_kJ"
DH = "dH_"

AMOUNT = "n_"
FRACTION = "y_"
#: Outputs of each pure condensed species (systems with one): whether its
#: phase is present, and its activity (1 when present; the activity it would
#: have in equilibrium with the mixture when absent, the carbon activity of
#: practice, NaN where the reactions do not fix it).
PRESENT = "present_"
ACTIVITY = "activity_"
#: Dry-basis mole fraction of each gas species that is not condensable
#: (systems with a condensable gas species, water by default): its share
#: of the gas without the condensable species.
DRY = "ydry_"
#: Syngas figures, where the gas holds H2 and CO: the H2/CO mole ratio, and
#: with CO2 the stoichiometric number (H2 - CO2) / (CO + CO2) of methanol
#: practice (2 for a balanced methanol synthesis gas).
H2_CO = "ratio_H2_CO"
SN = "SN"
EXTENT = "extent_"
CONVERSION = "conversion_"
#: Yields asked for in a sweep: ``yield_<species>_per_<fed>``, mol made per
#: mol of ``fed`` fed.
YIELD = "yield_"

#: Prefix of each per-species or per-reaction output column, with the
#: result attribute it holds (``conversion`` is ``result.conversion(species)``).
OUTPUTS = {AMOUNT: "amounts", FRACTION: "mole_fractions", EXTENT: "extents", CONVERSION: "conversion"}


def input_names(spec: SystemSpec, *, temperature: bool) -> list[str]:
    """``feed_<species>``, ``P_bar``, ``T_K`` (with ``temperature``), ``lnK_<label>``.

    Examples
    --------
    >>> from eqbatch import ReactionSystem
    >>> input_names(ReactionSystem(["Xa", "Xb"], {"iso": "Xa = Xb"}), temperature=True)
    ['feed_Xa', 'feed_Xb', 'P_bar', 'T_K', 'lnK_iso']
    """
    return (
        [FEED + name for name in spec.species]
        + [PRESSURE]
        + ([TEMPERATURE] if temperature else [])
        + [LNK + label for label in spec.labels]
    )


#: The unit of each column kind, by exact name and by prefix (UCUM-style
#: strings; ``1`` for a dimensionless quantity). Outputs are SI-based
#: (mol, K, bar absolute, kJ and J/mol); input columns in plant units keep
#: theirs. Sweeps and ``result.to_arrow()`` write them as Parquet field
#: metadata (``unit``).
_UNITS_BY_NAME = {
    "P_bar": "bar",
    "P_barg": "bar (gauge)",
    "P_kPa": "kPa",
    "P_MPa": "MPa",
    "P_atm": "atm",
    "P_psia": "psi",
    "P_psig": "psi (gauge)",
    "T_K": "K",
    "T_C": "Cel",
    "T_in_K": "K",
    "T_out_K": "K",
    "H_in_kJ": "kJ",
    "H_out_kJ": "kJ",
    "heat_kJ": "kJ",
    "duty_kJ": "kJ",
    "S_C": "mol/mol",
    "ratio_H2_CO": "mol/mol",
    "SN": "1",
}
_UNITS_BY_PREFIX = (
    ("feed_", "mol"),
    ("n_", "mol"),
    ("extent_", "mol"),
    ("ydry_", "1"),
    ("y_", "1"),
    ("conversion_", "1"),
    ("yield_", "mol/mol"),
    ("lnK_", "1"),
    ("activity_", "1"),
    ("approach_", "K"),
    ("dH_", "J/mol"),
    ("boundary_T", "K"),
    ("boundary_P", "bar"),
    ("boundary_", "mol"),
)


def unit_of(name: str, per_hour: bool = False) -> str | None:
    """The unit of a result-table column (None: a count, a flag or a name);
    with ``per_hour`` (a feed given as flows) amounts and energies are per
    hour.

    Examples
    --------
    >>> unit_of("n_CH4"), unit_of("y_H2"), unit_of("P_psig"), unit_of("dH_shift"), unit_of("status")
    ('mol', '1', 'psi (gauge)', 'J/mol', None)
    >>> unit_of("n_CH4", per_hour=True), unit_of("heat_kJ", per_hour=True)
    ('mol/h', 'kJ/h')
    """
    if name.endswith("]") and "[" in name:  # a column named with its unit: feed_CH4[kmol/h]
        return name[name.rindex("[") + 1 : -1]
    unit = _UNITS_BY_NAME.get(name) or next((u for p, u in _UNITS_BY_PREFIX if name.startswith(p)), None)
    if per_hour and unit in ("mol", "kJ"):
        return f"{unit}/h"
    return unit


def with_units(schema: Any, per_hour: bool = False) -> Any:
    """A :class:`pyarrow.Schema` whose fields carry their ``unit`` metadata
    (:func:`unit_of`), the schema's own metadata kept."""
    import pyarrow as pa

    fields = []
    for field in schema:
        unit = unit_of(field.name, per_hour)
        fields.append(field if unit is None else field.with_metadata({"unit": unit}))
    return pa.schema(fields, metadata=schema.metadata)


def output_names(spec: SystemSpec, converted: Iterable[str] = ()) -> list[str]:
    """``n_<species>``, ``y_<species>``, ``extent_<label>``, ``conversion_<c>``
    for each species ``c`` in ``converted``, ``status``, ``status_name``,
    ``iterations``.

    Examples
    --------
    >>> from eqbatch import ReactionSystem
    >>> output_names(ReactionSystem(["Xa", "Xb"], {"iso": "Xa = Xb"}), ["Xa"])
    ['n_Xa', 'n_Xb', 'y_Xa', 'y_Xb', 'extent_iso', 'conversion_Xa', 'status', 'status_name', 'iterations']
    """
    return (
        [AMOUNT + name for name in spec.species]
        + [FRACTION + name for name in spec.species]
        + [EXTENT + label for label in spec.labels]
        + [CONVERSION + name for name in converted]
        + [STATUS, STATUS_NAME, ITERATIONS]
    )


def input_columns(
    spec: SystemSpec, feed: np.ndarray, P: np.ndarray, T: np.ndarray | None, lnK: np.ndarray
) -> dict[str, np.ndarray]:
    """The input columns (:func:`input_names`) of ``N`` cases, as views of the arrays."""
    values = [*feed.T, P, *([] if T is None else [T]), *lnK.T]
    return dict(zip(input_names(spec, temperature=T is not None), values))


def output_columns(
    spec: SystemSpec,
    amounts: np.ndarray,
    mole_fractions: np.ndarray,
    extents: np.ndarray,
    status: np.ndarray,
    iterations: np.ndarray,
    conversions: Mapping[str, np.ndarray] | None = None,
) -> dict[str, np.ndarray]:
    """The output columns (:func:`output_names`) of ``N`` cases, as views of
    the arrays (``status_name`` holds the codes: :func:`status_names` makes
    the names)."""
    conversions = conversions or {}
    values = [*amounts.T, *mole_fractions.T, *extents.T, *conversions.values(), status, status, iterations]
    return dict(zip(output_names(spec, conversions), values))


#: Every status's name, by code (the core's table).
STATUS_NAMES = tuple(name for _, name, _ in _core.STATUS_TABLE)


def status_names(codes: np.ndarray, kind: str) -> Any:
    """The ``status_name`` column of ``codes``: ``kind`` ``"arrow"`` a
    dictionary-encoded pyarrow array, ``"pandas"`` a categorical, ``"numpy"``
    an array of strings.

    Examples
    --------
    >>> status_names(np.array([0, 4], dtype=np.uint8), "numpy").tolist()
    ['CONVERGED', 'STALLED']
    """
    codes = np.asarray(codes, dtype=np.uint8)
    if kind == "arrow":
        import pyarrow as pa

        return pa.DictionaryArray.from_arrays(pa.array(codes, pa.uint8()), pa.array(STATUS_NAMES))
    if kind == "pandas":
        import pandas as pd

        return pd.Categorical.from_codes(codes, categories=pd.Index(list(STATUS_NAMES)))
    return np.array(STATUS_NAMES)[codes]


def pure_species(spec: SystemSpec) -> list[str]:
    """The species that are a phase of their own (solids, pure liquids)."""
    return [name for name, phase in zip(spec.species, spec.phases) if phase in PURE_KINDS]


def phase_names(spec: SystemSpec) -> list[str]:
    """``present_<s>`` and ``activity_<s>`` for each pure condensed species ``s``.

    Examples
    --------
    >>> from eqbatch import ReactionSystem
    >>> phase_names(ReactionSystem(["C", "CO2", "CO"], ["C + CO2 = 2 CO"], phases={"C": "solid"}))
    ['present_C', 'activity_C']
    """
    return [prefix + name for name in pure_species(spec) for prefix in (PRESENT, ACTIVITY)]


def phase_columns(spec: SystemSpec, present: np.ndarray, activities: np.ndarray) -> dict[str, np.ndarray]:
    """The columns :func:`phase_names` of ``N`` cases from ``result.present``
    (N, P) and ``result.activities`` (N, S)."""
    out: dict[str, np.ndarray] = {}
    for name in pure_species(spec):
        i = spec.species.index(name)
        out[PRESENT + name] = present[:, spec.phase_index[i]]
        out[ACTIVITY + name] = activities[:, i]
    return out


def dry_species(spec: SystemSpec) -> list[str]:
    """The gas species of a dry basis: none unless the gas holds a
    condensable species (``spec.condensable``), else every gas species but
    those."""
    gas = [name for name, phase in zip(spec.species, spec.phases) if phase == "gas"]
    wet = [name for name in spec.condensable if name in gas]
    return [name for name in gas if name not in wet] if wet else []


def dry_names(spec: SystemSpec) -> list[str]:
    """``ydry_<s>`` for each species of the dry basis (:func:`dry_species`).

    Examples
    --------
    >>> from eqbatch import ReactionSystem
    >>> dry_names(ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"]))
    ['ydry_CO', 'ydry_CO2', 'ydry_H2']
    """
    return [DRY + name for name in dry_species(spec)]


def dry_fractions(spec: SystemSpec, amounts: np.ndarray) -> np.ndarray:
    """(N, S) dry-basis mole fractions: each species of the dry basis over
    their sum (0 where the dry gas is empty), NaN for the other species."""
    keep = np.array([name in dry_species(spec) for name in spec.species])
    out = np.full(amounts.shape, np.nan)
    if keep.any():
        dry = amounts[:, keep]
        total = dry.sum(axis=1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            out[:, keep] = np.where(total > 0, dry / np.where(total > 0, total, 1.0), 0.0)
        out[~np.isfinite(amounts).all(axis=1)] = np.nan
    return out


def dry_columns(spec: SystemSpec, amounts: np.ndarray) -> dict[str, np.ndarray]:
    """The columns :func:`dry_names` of ``N`` cases."""
    names = dry_species(spec)
    if not names:
        return {}
    fractions = dry_fractions(spec, amounts)
    return {DRY + name: fractions[:, spec.species.index(name)] for name in names}


def syngas_names(spec: SystemSpec) -> list[str]:
    """``ratio_H2_CO`` where the gas holds H2 and CO, and ``SN`` where it
    also holds CO2.

    Examples
    --------
    >>> from eqbatch import ReactionSystem
    >>> syngas_names(ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"]))
    ['ratio_H2_CO', 'SN']
    """
    gas = {name for name, phase in zip(spec.species, spec.phases) if phase == "gas"}
    if not {"H2", "CO"} <= gas:
        return []
    return [H2_CO] + ([SN] if "CO2" in gas else [])


def syngas_columns(spec: SystemSpec, amounts: np.ndarray) -> dict[str, np.ndarray]:
    """The columns :func:`syngas_names` of ``N`` cases (``inf`` where the
    denominator is zero and the numerator is not, NaN where both are)."""
    names = syngas_names(spec)
    if not names:
        return {}
    n = {sp: amounts[:, spec.species.index(sp)] for sp in ("H2", "CO", "CO2") if sp in spec.species}
    with np.errstate(invalid="ignore", divide="ignore"):
        out = {H2_CO: n["H2"] / n["CO"]}
        if SN in names:
            out[SN] = (n["H2"] - n["CO2"]) / (n["CO"] + n["CO2"])
    return out


def parse_output(name: str) -> tuple[str, str]:
    """What an output column holds: ``"y_H2"`` -> ``("mole_fractions", "H2")``.

    Parameters
    ----------
    name : str
        ``n_<species>``, ``y_<species>``, ``extent_<label>`` or ``conversion_<species>``.

    Returns
    -------
    (str, str)
        The result attribute (``amounts``, ``mole_fractions``, ``extents``,
        ``conversion``) and the species or reaction label.

    Raises
    ------
    CaseInputError
        ``name`` has none of these prefixes.

    Examples
    --------
    >>> parse_output("y_H2"), parse_output("extent_shift")
    (('mole_fractions', 'H2'), ('extents', 'shift'))
    """
    prefix, sep, rest = name.partition("_")
    if not sep or prefix + sep not in OUTPUTS or not rest:
        raise CaseInputError(
            f"output {name!r} must be n_<species>, y_<species>, extent_<label> or conversion_<species>"
        )
    return OUTPUTS[prefix + sep], rest
