"""What each per-case status code means.

The codes, names and descriptions come from the compiled core's one status
table (``_core.STATUS_TABLE``); :class:`Status` spells the same codes out for
readers and type checkers, and this module refuses to load if the two differ.
Results, the command line and the Parquet writer all read them from here.
"""

from __future__ import annotations

from enum import IntEnum

from eqbatch import _core


class Status(IntEnum):
    """Per-case outcome, stored as small integers in ``result.status``.

    The numbers are a stable contract (they are written to result tables).

    Examples
    --------
    >>> from eqbatch import ReactionSystem, Status
    >>> res = ReactionSystem(["Xa", "Xb"], ["Xa = Xb"]).solve([[1.0, 0.0], [-1.0, 0.0]], lnK=0.0)
    >>> [Status(int(code)).name for code in res.status]
    ['CONVERGED', 'INVALID_INPUT']
    >>> res.message(1) == "case 1: " + Status.INVALID_INPUT.description
    True
    """

    #: Every reaction satisfies its equilibrium condition within ``tol``.
    CONVERGED = 0
    #: ``max_iter`` Newton iterations were not enough; amounts are the last
    #: (feasible, conserving) iterate.
    ITERATION_LIMIT = 1
    #: Negative or non-finite feed, zero total feed, non-finite ln K, or a
    #: non-positive or non-finite pressure or temperature; every output of
    #: the case is NaN.
    INVALID_INPUT = 2
    #: No equilibrium exists for the feed (the extents are unbounded).
    INFEASIBLE = 3
    #: The Gibbs function could not be lowered further before ``tol`` was met
    #: (float64 limit for the case); amounts are the last iterate.
    STALLED = 4
    #: Adiabatic solve: no outlet temperature within the species data's
    #: range balances the enthalpy; amounts are those at the range's edge.
    OUT_OF_RANGE = 5
    #: At equilibrium, except that some species would lie below the smallest
    #: amount float64 can follow (about 1e-305 mol): they are held there (an
    #: upper bound) and the reactions that would push them lower are unmet.
    #: Counted as converged (``result.converged``); ``message`` names them.
    UNDERFLOW = 6
    #: :func:`eqbatch.phase_boundary`: the phase does not just appear anywhere
    #: in the bracket (present at both ends, or at neither); the value is NaN.
    NO_BOUNDARY = 7
    #: Non-ideal gas: the equation of state has no vapour-like root at the
    #: case's composition, temperature and pressure (it would be a liquid).
    NO_VAPOUR_ROOT = 8

    @property
    def description(self) -> str:
        """The core's sentence for this status (what ``result.message`` says).

        Returns
        -------
        str
            The sentence after ``case i:`` in :meth:`EquilibriumResult.message`.

        Examples
        --------
        >>> Status.INFEASIBLE.description == Status(3).description
        True
        """
        return _DESCRIPTIONS[self]


_DESCRIPTIONS = {Status(code): text for code, _, text in _core.STATUS_TABLE}
if [(int(m), m.name) for m in Status] != [(code, name) for code, name, _ in _core.STATUS_TABLE]:
    raise ImportError("eqbatch.Status does not match the compiled core's status table: rebuild the extension")

#: Codes whose amounts are an equilibrium (``result.converged``).
CONVERGED_CODES = (Status.CONVERGED, Status.UNDERFLOW)


def status_words(code: int) -> str:
    """A status as summaries count it: ``2`` -> ``'invalid input'``.

    Examples
    --------
    >>> status_words(Status.ITERATION_LIMIT)
    'iteration limit'
    """
    return Status(int(code)).name.lower().replace("_", " ")
