"""Global and local Moran's I of district values (pure: no I/O, no plotting).

Wraps :class:`esda.Moran_Local` and :class:`esda.Moran` so that nothing after
this module sees esda's attribute names (``Is``, ``p_sim``, ``q``). Both
functions apply the same rules before calling esda:

1. Districts whose value is NaN (no data, suppressed) are left out; the
   neighbour sets of the others are restricted to districts with data and
   the weights re-standardised (:func:`sitrep.analysis.weights.subgraph`).
2. Districts left without any neighbour (islands, and districts whose only
   neighbours had no data) are left out as well: they are never given a
   p-value and never enter the multiple-testing family.
3. The statistic is computed on the remaining "tested" districts only; their
   mean and variance define the z-values. If fewer than three remain, or all
   their values are equal, the statistic is *not assessable* and every
   tested district is labelled so (never "not significant").
"""

from __future__ import annotations

import dataclasses
import inspect
import warnings
from typing import Any, Literal

import numpy as np
import numpy.typing as npt

from sitrep.analysis.multitest import benjamini_hochberg
from sitrep.analysis.weights import DistrictGraph, subgraph
from sitrep.errors import AnalysisError
from sitrep.model import ClusterLabel

__all__ = [
    "ALTERNATIVE",
    "QUADRANT_LABELS",
    "SIGNIFICANT_LABELS",
    "ClusterResult",
    "GlobalMoranResult",
    "global_moran",
    "local_clusters",
]

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]
BoolArray = npt.NDArray[np.bool_]

QUADRANT_LABELS: dict[int, ClusterLabel] = {
    1: ClusterLabel.HIGH_HIGH,
    2: ClusterLabel.LOW_HIGH,
    3: ClusterLabel.LOW_LOW,
    4: ClusterLabel.HIGH_LOW,
}
"""esda's default quadrant codes (documented in its Moran_Local docstring) to labels: the one registry."""

SIGNIFICANT_LABELS: frozenset[ClusterLabel] = frozenset(QUADRANT_LABELS.values())
"""Labels that mark a significant district (a cluster core or a spatial outlier)."""

ALTERNATIVE = (
    "directed (folded one-sided) conditional-permutation test: M = number of the R "
    "permuted local I at least as large as the observed one; if R - M < M then M = R - M; "
    "p = (M + 1) / (R + 1), so the smallest p is 1/(R + 1) and the largest about 0.5"
)
"""The pseudo p-value rule of esda 2.9.0's ``Moran_Local`` (its default, now deprecated)."""

Correction = Literal["fdr_bh", "none"]
_CORRECTIONS: tuple[str, ...] = ("fdr_bh", "none")
_MIN_TESTED = 3


@dataclasses.dataclass(frozen=True, eq=False)
class ClusterResult:
    """Local Moran's I of one week, one row per district of the graph.

    Arrays are aligned with ``ids`` and read-only. Untested districts (no data,
    no neighbours, or a not-assessable statistic) have ``local_i``,
    ``p_values`` and ``q_values`` NaN and ``quadrants`` 0.

    Attributes
    ----------
    ids : tuple of str
        District ids in graph order.
    local_i : numpy.ndarray of float
        esda's local I: ``I_i = (n - 1) z_i (W z)_i / sum_k z_k^2`` over the n
        tested districts (z = value minus mean, row-standardised W). This is
        ``(n - 1)/n`` times Anselin's (1995) scaling, so
        ``sum_i I_i = ((n - 1)/n) * S0 * I`` with I the global Moran's I of the
        same values and weights (S0 = n without islands, as here).
    p_values : numpy.ndarray of float
        Pseudo p-values of the conditional permutation test (see
        ``alternative``).
    q_values : numpy.ndarray of float
        Benjamini-Hochberg adjusted p-values over the tested districts only
        (computed for every ``correction``, shown for information when
        ``correction == "none"``).
    quadrants : numpy.ndarray of int
        esda quadrant codes: 1 HH, 2 LH, 3 LL, 4 HL (z > 0 and lag > 0 are
        strict: a value exactly at the mean counts as low); 0 when untested.
    labels : tuple of ClusterLabel
        The quadrant's label when significant; NOT_SIGNIFICANT, NO_DATA,
        NO_NEIGHBOURS or NOT_ASSESSABLE otherwise.
    significant : numpy.ndarray of bool
        ``q <= q_level`` (BH rejection) when ``correction == "fdr_bh"``,
        ``p <= alpha`` when ``correction == "none"``; False when untested.
    tested : numpy.ndarray of bool
        Districts that entered the statistic.
    assessable : bool
        False when the statistic could not be computed (fewer than three
        tested districts or zero variance); then no district is significant
        and the report must not say "no clusters".
    permutations, seed, alpha, correction, q :
        Inference settings as used.
    esda_version : str
        Version of esda that computed the p-values (they are reproducible
        only for the same version, seed, R and district order).
    alternative : str
        The pseudo p-value rule (:data:`ALTERNATIVE`).
    notes : tuple of str
        Plain-language remarks: districts left out and why, why not assessable.
    """

    ids: tuple[str, ...]
    local_i: FloatArray
    p_values: FloatArray
    q_values: FloatArray
    quadrants: IntArray
    labels: tuple[ClusterLabel, ...]
    significant: BoolArray
    tested: BoolArray
    assessable: bool
    permutations: int
    seed: int
    alpha: float
    correction: str
    q: float
    esda_version: str
    alternative: str
    notes: tuple[str, ...]

    def __post_init__(self) -> None:
        for name in ("local_i", "p_values", "q_values", "quadrants", "significant", "tested"):
            getattr(self, name).setflags(write=False)

    def __reduce__(self) -> tuple[object, tuple[object, ...]]:
        """Pickle through the constructor, so an unpickled result's arrays are read-only too."""
        fields = tuple(getattr(self, f.name) for f in dataclasses.fields(self))
        return (type(self), fields)

    @property
    def n_tested(self) -> int:
        """Number of districts that entered the statistic (the BH family size)."""
        return int(self.tested.sum())

    def counts(self) -> dict[ClusterLabel, int]:
        """Number of districts per label, in :class:`ClusterLabel` order (zeros included)."""
        return {label: sum(1 for x in self.labels if x is label) for label in ClusterLabel}

    def ids_with(self, label: ClusterLabel) -> tuple[str, ...]:
        """Sorted ids of districts with ``label``."""
        return tuple(sorted(i for i, x in zip(self.ids, self.labels, strict=True) if x is label))


@dataclasses.dataclass(frozen=True)
class GlobalMoranResult:
    """Global Moran's I of one week over the tested districts.

    Attributes
    ----------
    available : bool
        False when fewer than three districts are tested or the values have
        zero variance; every number is then NaN and ``reason`` says why.
    reason : str
        Why the statistic is not available ("" when it is).
    i : float
        Moran's I = (n/S0) * sum_ij w_ij z_i z_j / sum_i z_i^2 (row-standardised W).
    expectation : float
        E[I] = -1/(n - 1).
    variance_norm : float
        Variance of I under the normality assumption (Cliff & Ord 1981).
    z_norm, p_norm : float
        z-value and **two-sided** normal p-value under normality.
    z_rand, p_rand : float
        The same under the randomisation assumption (two-sided p).
    p_sim : float
        One-sided permutation p-value in the direction of the observed I,
        (M + 1)/(R + 1), from ``permutations`` random relabellings.
    n : int
        Number of tested districts.
    permutations, seed : int
        Permutation settings used.
    notes : tuple of str
        Districts left out and why.
    """

    available: bool
    reason: str
    i: float
    expectation: float
    variance_norm: float
    z_norm: float
    p_norm: float
    z_rand: float
    p_rand: float
    p_sim: float
    n: int
    permutations: int
    seed: int
    notes: tuple[str, ...]


@dataclasses.dataclass(frozen=True, eq=False)
class _Tested:
    """Which districts enter the statistic, and the weights among them."""

    mask: BoolArray
    graph: DistrictGraph
    no_data: tuple[str, ...]
    no_neighbours: tuple[str, ...]
    notes: tuple[str, ...]
    reason: str


def _tested_set(values: FloatArray, dg: DistrictGraph) -> _Tested:
    """Apply rules 1-3 of the module docstring."""
    has_data = np.isfinite(values)
    no_data = tuple(sorted(i for i, ok in zip(dg.ids, has_data, strict=True) if not ok))
    with_data = subgraph(dg, has_data)
    isolated = set(with_data.no_neighbours)
    mask = np.array(
        [bool(ok) and i not in isolated for i, ok in zip(dg.ids, has_data, strict=True)],
        dtype=bool,
    )
    notes: list[str] = []
    if no_data:
        notes.append(
            f"{len(no_data)} district(s) without data or withheld this week were left out of the "
            f"cluster statistic: {', '.join(no_data)}"
        )
    originally = set(dg.no_neighbours)
    islands = tuple(sorted(isolated & originally))
    orphaned = tuple(sorted(isolated - originally))
    if islands:
        notes.append(
            f"{len(islands)} district(s) have no neighbour and are not tested: {', '.join(islands)}"
        )
    if orphaned:
        notes.append(
            f"{len(orphaned)} district(s) have no neighbour with data this week and are not "
            f"tested: {', '.join(orphaned)}"
        )
    tested_graph = subgraph(dg, mask)
    y = values[mask]
    reason = ""
    if y.size < _MIN_TESTED:
        reason = (
            f"Moran's I needs at least {_MIN_TESTED} districts with data and a neighbour; "
            f"got {y.size}"
        )
    elif np.all(y == y[0]):
        reason = (
            f"all {y.size} tested districts have the same value ({y[0]:g}); with zero "
            "variance Moran's I is undefined"
        )
    if reason:
        notes.append("cluster statistic not assessable: " + reason)
    return _Tested(
        mask=mask,
        graph=tested_graph,
        no_data=no_data,
        no_neighbours=tuple(sorted(isolated)),
        notes=tuple(notes),
        reason=reason,
    )


def _checked_values(values: npt.ArrayLike, dg: DistrictGraph) -> FloatArray:
    arr = np.asarray(values, dtype=np.float64)
    if arr.shape != (dg.n,):
        raise AnalysisError(
            f"expected one value per district of the graph ({dg.n}), got shape {arr.shape}; "
            "align the values with DistrictGraph.ids"
        )
    if np.isinf(arr).any():
        raise AnalysisError("values must be finite or NaN (no data), got an infinite value")
    return arr


def _esda_version() -> str:
    import esda

    return str(getattr(esda, "__version__", "unknown"))


def local_clusters(
    values: npt.ArrayLike,
    dg: DistrictGraph,
    *,
    permutations: int = 999,
    seed: int = 12345,
    alpha: float = 0.05,
    correction: Correction = "fdr_bh",
    q: float = 0.05,
) -> ClusterResult:
    """Local Moran's I with conditional-permutation pseudo p-values, labelled.

    For the tested districts (data and at least one neighbour with data; see
    the module docstring), ``esda.Moran_Local(y, W, transformation="r",
    permutations=R, seed=seed)`` gives ``I_i``, quadrant codes and pseudo
    p-values; a district is significant when its Benjamini-Hochberg adjusted
    p-value is at most ``q`` (``correction="fdr_bh"``, family = the tested
    districts) or its p-value is at most ``alpha`` (``correction="none"``).
    A significant district takes its quadrant's label (HH, LH, LL, HL).

    Parameters
    ----------
    values : numpy.ndarray of float, shape (dg.n,)
        One value per district in ``dg.ids`` order; NaN = no data.
    dg : DistrictGraph
        Neighbour graph from :func:`sitrep.analysis.weights.build_graph`.
    permutations : int, default 999
        Number R of conditional permutations (at least 1).
    seed : int, default 12345
        Seed of esda's permutation engine.
    alpha : float, default 0.05
        Level for ``correction="none"``; recorded otherwise.
    correction : {"fdr_bh", "none"}, default "fdr_bh"
        Multiple-testing correction.
    q : float, default 0.05
        False discovery rate for ``correction="fdr_bh"``.

    Returns
    -------
    ClusterResult

    Raises
    ------
    AnalysisError
        If ``values`` is not aligned with ``dg`` or holds an infinite value,
        or a setting is out of range.

    Notes
    -----
    esda 2.9.0 has no ``alternative`` argument and warns (DeprecationWarning)
    that its default "directed" rule will change; that one warning is
    silenced here on purpose (``warnings.catch_warnings``) because the rule
    is recorded in ``alternative`` and printed in the methods note. With an
    esda that accepts ``alternative``, "directed" is passed explicitly so
    results keep their meaning. Both comparisons ("<=" for BH and for alpha)
    follow the published BH rule; esda's own ``get_cluster_labels`` uses a
    strict "<". esda reuses one matrix of permuted indices for all sites, so
    p-values depend on the district order as well as on the seed.

    A tested district whose value equals the mean exactly has z_i = 0, so its
    local I is 0 under every permutation; esda's fold would report the
    smallest possible p (as for an island). Its p-value is set to 1 instead
    and a note names it. The permuted values are kept
    (``keep_simulations=True``, R x n floats, about 80 MB for R = 999 and
    10,000 districts) to detect this and because esda then computes
    ``p = (M + 1)/(R + 1)`` in float64 exactly.
    """
    arr = _checked_values(values, dg)
    _check_settings(permutations, alpha, correction, q)
    n = dg.n
    tested = _tested_set(arr, dg)
    local_i = np.full(n, np.nan)
    p_values = np.full(n, np.nan)
    quadrants = np.zeros(n, dtype=np.int64)
    mask = tested.mask
    notes = list(tested.notes)
    if not tested.reason:
        lm = _moran_local(arr[mask], tested.graph, permutations, seed)
        p_sim = np.asarray(lm.p_sim, dtype=np.float64).copy()
        # Every permuted I_i equals the observed one (z_i = 0: the value is exactly the
        # mean). esda's fold then reports the smallest p, 1/(R+1); there is no evidence.
        degenerate = np.all(np.asarray(lm.sim) == np.asarray(lm.Is)[np.newaxis, :], axis=0)
        if degenerate.any():
            p_sim[degenerate] = 1.0
            flat = sorted(np.asarray(tested.graph.ids)[degenerate].tolist())
            notes.append(
                f"{len(flat)} district(s) have a value equal to the mean, so their local "
                f"statistic is 0 under every permutation; p set to 1: {', '.join(flat)}"
            )
        local_i[mask] = np.asarray(lm.Is, dtype=np.float64)
        p_values[mask] = p_sim
        quadrants[mask] = np.asarray(lm.q, dtype=np.int64)
    reject, q_values = benjamini_hochberg(p_values, q)
    if tested.reason:
        significant = np.zeros(n, dtype=bool)
    elif correction == "fdr_bh":
        significant = reject & mask
    else:
        significant = mask & (np.nan_to_num(p_values, nan=1.0) <= alpha)
    no_data = set(tested.no_data)
    no_nb = set(tested.no_neighbours)
    labels: list[ClusterLabel] = []
    for j, district in enumerate(dg.ids):
        if district in no_data:
            labels.append(ClusterLabel.NO_DATA)
        elif district in no_nb:
            labels.append(ClusterLabel.NO_NEIGHBOURS)
        elif tested.reason:
            labels.append(ClusterLabel.NOT_ASSESSABLE)
        elif significant[j]:
            labels.append(QUADRANT_LABELS[int(quadrants[j])])
        else:
            labels.append(ClusterLabel.NOT_SIGNIFICANT)
    return ClusterResult(
        ids=dg.ids,
        local_i=local_i,
        p_values=p_values,
        q_values=q_values,
        quadrants=quadrants,
        labels=tuple(labels),
        significant=significant,
        tested=mask.copy(),
        assessable=not tested.reason,
        permutations=permutations,
        seed=seed,
        alpha=alpha,
        correction=correction,
        q=q,
        esda_version=_esda_version(),
        alternative=ALTERNATIVE,
        notes=tuple(notes),
    )


def global_moran(
    values: npt.ArrayLike,
    dg: DistrictGraph,
    *,
    permutations: int = 999,
    seed: int = 12345,
) -> GlobalMoranResult:
    """Global Moran's I over the tested districts, with analytic and permutation p.

    ``esda.Moran(y, W, transformation="r", permutations=R, two_tailed=True)``
    on the districts that have data and at least one neighbour with data
    (the same set as :func:`local_clusters`).

    Parameters
    ----------
    values : numpy.ndarray of float, shape (dg.n,)
        One value per district in ``dg.ids`` order; NaN = no data.
    dg : DistrictGraph
        Neighbour graph.
    permutations : int, default 999
        Number of random relabellings for ``p_sim`` (at least 1).
    seed : int, default 12345
        Seed of NumPy's legacy global generator for those relabellings.

    Returns
    -------
    GlobalMoranResult
        ``available`` False (numbers NaN) when fewer than three districts are
        tested or their values do not vary.

    Raises
    ------
    AnalysisError
        If ``values`` is not aligned with ``dg`` or a setting is out of range.

    Notes
    -----
    esda 2.9.0's ``Moran`` has no seed argument: it draws from NumPy's legacy
    global ``RandomState``. The state is saved, seeded with ``seed``
    immediately before the call and restored afterwards, so the result is
    reproducible and the caller's random stream is untouched (not
    thread-safe: do not run two of these concurrently in one process).
    Removing islands before the call differs from esda's own handling, which
    keeps them in n (and so shrinks I); here they are not part of the test.
    """
    arr = _checked_values(values, dg)
    if permutations < 1:
        raise AnalysisError(f"permutations must be at least 1, got {permutations}")
    tested = _tested_set(arr, dg)
    n = int(tested.mask.sum())
    if tested.reason:
        nan = float("nan")
        return GlobalMoranResult(
            False,
            tested.reason,
            nan,
            nan,
            nan,
            nan,
            nan,
            nan,
            nan,
            nan,
            n,
            permutations,
            seed,
            tested.notes,
        )
    import esda

    state = np.random.get_state()
    try:
        np.random.seed(seed)
        m = esda.Moran(
            arr[tested.mask],
            tested.graph.graph,
            transformation="r",
            permutations=permutations,
            two_tailed=True,
        )
    finally:
        np.random.set_state(state)
    return GlobalMoranResult(
        available=True,
        reason="",
        i=float(m.I),
        expectation=float(m.EI),
        variance_norm=float(m.VI_norm),
        z_norm=float(m.z_norm),
        p_norm=float(m.p_norm),
        z_rand=float(m.z_rand),
        p_rand=float(m.p_rand),
        p_sim=float(m.p_sim),
        n=n,
        permutations=permutations,
        seed=seed,
        notes=tested.notes,
    )


def _check_settings(permutations: int, alpha: float, correction: str, q: float) -> None:
    if permutations < 1:
        raise AnalysisError(
            f"permutations must be at least 1 (999 or more is usual), got {permutations}"
        )
    if not 0 < alpha < 1:
        raise AnalysisError(f"alpha must be strictly between 0 and 1, got {alpha!r}")
    if not 0 < q < 1:
        raise AnalysisError(f"fdr q must be strictly between 0 and 1, got {q!r}")
    if correction not in _CORRECTIONS:
        raise AnalysisError(
            f"correction must be one of {', '.join(_CORRECTIONS)}, got {correction!r}"
        )


def _moran_local(y: FloatArray, graph: DistrictGraph, permutations: int, seed: int) -> Any:
    """Run esda's Moran_Local with the directed rule made explicit or its warning silenced."""
    import esda

    kwargs: dict[str, Any] = {
        "transformation": "r",
        "permutations": permutations,
        "seed": seed,
        "keep_simulations": True,
        "n_jobs": 1,
    }
    if "alternative" in inspect.signature(esda.Moran_Local).parameters:
        kwargs["alternative"] = "directed"  # pragma: no cover - esda >= 2.10
    with warnings.catch_warnings(), np.errstate(invalid="ignore", divide="ignore"):
        # esda 2.9.0: "The alternative hypothesis for conditional randomization is changing".
        warnings.filterwarnings(
            "ignore", message=r".*alternative hypothesis.*", category=DeprecationWarning
        )
        # errstate: esda divides by the permutation SD to get z_sim (unused here), which is
        # 0/0 for a site whose value equals the mean; such sites are handled by the caller.
        return esda.Moran_Local(y, graph.graph, **kwargs)
