"""Type stubs of the compiled core (private: use the ``eqbatch`` package)."""

import numpy as np
import numpy.typing as npt

__version__: str
#: The smallest amount the solver follows (mol, any amount unit).
FLOAT_FLOOR: float
#: (code, name, description) of every status, in code order.
STATUS_TABLE: list[tuple[int, str, str]]
#: Vector instructions the lane kernels use here: "avx512", "avx2" or "portable".
VECTOR_PATH: str

class StoichiometryError(ValueError):
    """args: (kind, reaction, indices, coefficients); kind is one of
    'dependent', 'unbounded', 'empty', 'non-finite'."""

class System:
    def __init__(self, stoich: npt.NDArray[np.float64], phases: list[int], p0: float) -> None:
        """phases: 0 gas, 1 + k ideal solution k (1 the liquid), 255 a pure species."""
    @property
    def n_species(self) -> int: ...
    @property
    def n_reactions(self) -> int: ...
    @property
    def phase_index(self) -> list[int]: ...
    @property
    def n_phases(self) -> int: ...
    def sensitivities_prepared(
        self,
        feed: npt.NDArray[np.float64],
        pressure: float,
        n_cases: int,
        floats: npt.NDArray[np.float64],
        words: npt.NDArray[np.uint64],
        threads: int | None,
        derivs: npt.NDArray[np.float64],
    ) -> None: ...
    def solve_prepared(
        self,
        feed: npt.NDArray[np.float64],
        ln_k: npt.NDArray[np.float64],
        pressure: float,
        n_cases: int,
        tol: float,
        max_iter: int,
        threads: int | None,
        floats: npt.NDArray[np.float64],
        words: npt.NDArray[np.uint64],
    ) -> None: ...
    def solve(
        self,
        feed: npt.NDArray[np.float64],
        ln_k: npt.NDArray[np.float64],
        pressure: npt.NDArray[np.float64],
        n_cases: int,
        tol: float,
        max_iter: int,
        threads: int | None = None,
        start: npt.NDArray[np.float64] | None = None,
        chain: bool = False,
        out: tuple[
            npt.NDArray[np.float64],
            npt.NDArray[np.float64],
            npt.NDArray[np.uint8],
            npt.NDArray[np.uint32],
            npt.NDArray[np.uint64],
        ]
        | None = None,
    ) -> tuple[
        npt.NDArray[np.float64],
        npt.NDArray[np.float64],
        npt.NDArray[np.uint8],
        npt.NDArray[np.uint32],
        npt.NDArray[np.uint64],
    ]: ...
    def mole_fractions(self, amounts: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]: ...
    def adiabatic(
        self,
        table: ThermoTable,
        lo: float,
        hi: float,
        feed: npt.NDArray[np.float64],
        enthalpy: npt.NDArray[np.float64] | None,
        heat: npt.NDArray[np.float64],
        t_start: npt.NDArray[np.float64],
        pressure: npt.NDArray[np.float64],
        shift: npt.NDArray[np.float64] | None,
        start: npt.NDArray[np.float64] | None,
        tol: float,
        max_iter: int,
        threads: int | None,
        out: tuple[
            npt.NDArray[np.float64],
            npt.NDArray[np.float64],
            npt.NDArray[np.uint8],
            npt.NDArray[np.uint32],
        ]
        | None = None,
    ) -> tuple[
        npt.NDArray[np.float64],
        npt.NDArray[np.float64],
        npt.NDArray[np.float64],
        npt.NDArray[np.uint8],
        npt.NDArray[np.uint32],
        npt.NDArray[np.float64],
    ]: ...
    def sensitivities(
        self,
        feed: npt.NDArray[np.float64],
        pressure: npt.NDArray[np.float64],
        amounts: npt.NDArray[np.float64],
        status: npt.NDArray[np.uint8],
        absent: npt.NDArray[np.uint64] | None = None,
        threads: int | None = None,
        with_feed: bool = True,
    ) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64], npt.NDArray[np.float64]]: ...

#: One temperature range of species data: (upto, closed, scale, a0, a1, a2, a3, a4, e, h, s).
_Segment = tuple[float, bool, float, float, float, float, float, float, float, float, float]

class ThermoTable:
    """Reactions' ln K and standard enthalpy from species data, per temperature."""

    def __init__(
        self,
        data: list[list[_Segment]],
        coef: npt.NDArray[np.float64],
        shift: npt.NDArray[np.float64],
    ) -> None: ...
    def evaluate(
        self, temperature: npt.NDArray[np.float64]
    ) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]]: ...
    def species(
        self, temperature: npt.NDArray[np.float64]
    ) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]]: ...
