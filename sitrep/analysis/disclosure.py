"""Statistical disclosure control: which district counts are withheld, and why (pure).

A *cell* is one district's counts in one week: its ILI visits ``x`` and all
visits ``n``. A *group* is the set of cells whose sum the report publishes
(the jurisdiction total of that week). docs/methods.md §6.2 gives the rules;
in short:

1. **Primary suppression** (:func:`primary_rule`): a cell is withheld when
   ``0 < n < min_visits``, when ``1 <= x < min_count``, or when ``x == 0`` and
   zeros are suppressed (a district with no visits at all has nothing to
   protect).
2. **Earlier publications**: a cell withheld in an earlier version of the same
   report, or in the report that first published that week, stays withheld
   (``carried``), so that comparing two publications gives nothing away.
3. **Complementary suppression** (:func:`protect_group`): the published total
   minus the shown cells gives the sum of the withheld ones. Further cells are
   withheld (fewest visits first, preferring cells already withheld in the
   other week) until the withheld cells whose values the reader does not know
   from elsewhere are at least two, together hold at least ``min_visits``
   visits and at least ``max(min_count, 1)`` ILI visits. A withheld cell whose
   counts the reader already knows unchanged from an earlier publication
   (``known``) protects nothing and is not counted.
4. When no choice of cells can meet that (too few districts, or the total
   itself is a small count), the group's total is withheld as well
   (:attr:`GroupDecision.total_withheld`) and the report says so.

The decision is a record (:class:`DisclosureDecision`) that analysis applies to
every derived figure and that render words as a short note
(:func:`sitrep.render.wording.sentences.withheld_sentence`); nothing here reads
files or prints.
"""

from __future__ import annotations

import dataclasses
import enum
from collections.abc import Iterable, Mapping, Sequence

__all__ = [
    "Cell",
    "DisclosureDecision",
    "DisclosureRules",
    "Earlier",
    "GroupDecision",
    "Rule",
    "WithheldCell",
    "decide",
    "group_is_protected",
    "primary_rule",
    "protect_group",
]


class Rule(enum.Enum):
    """Why a cell is withheld."""

    FEW_VISITS = "few-visits"
    """Primary: fewer visits than ``analysis.min_visits``."""
    SMALL_COUNT = "small-count"
    """Primary: an ILI count from 1 to ``analysis.min_count`` - 1."""
    ZERO_COUNT = "zero-count"
    """Primary: a zero ILI count, with ``analysis.suppress_zero``."""
    EARLIER = "withheld-earlier"
    """Withheld because an earlier publication of the same week withheld it."""
    COMPLEMENTARY = "complementary"
    """Withheld so that no primary cell can be worked out from the total."""

    @property
    def is_primary(self) -> bool:
        """True for the three primary rules."""
        return self in (Rule.FEW_VISITS, Rule.SMALL_COUNT, Rule.ZERO_COUNT)


@dataclasses.dataclass(frozen=True)
class DisclosureRules:
    """The thresholds of the primary rule (``analysis.min_visits``, ``min_count``, ``suppress_zero``)."""

    min_visits: int = 30
    min_count: int = 5
    suppress_zero: bool = False

    def __post_init__(self) -> None:
        if self.min_visits < 0 or self.min_count < 0:
            raise ValueError(
                f"min_visits and min_count must not be negative, got {self.min_visits}, "
                f"{self.min_count}"
            )

    @property
    def min_withheld_count(self) -> int:
        """Fewest ILI visits the withheld cells of a group must hold together (never 0)."""
        return max(self.min_count, 1)


@dataclasses.dataclass(frozen=True)
class Cell:
    """One district's counts in one week (a district without a row that week is no cell)."""

    district_id: str
    ili: int
    visits: int

    def __post_init__(self) -> None:
        if self.ili < 0 or self.visits < 0 or self.ili > self.visits:
            raise ValueError(
                f"district {self.district_id}: counts must satisfy 0 <= ILI <= visits, got "
                f"{self.ili} of {self.visits}"
            )


@dataclasses.dataclass(frozen=True)
class WithheldCell:
    """One withheld cell and the rule that withheld it."""

    district_id: str
    rule: Rule


@dataclasses.dataclass(frozen=True)
class GroupDecision:
    """What is withheld in one group (one week's cells and their published total)."""

    label: str
    """The week, e.g. ``"2026-W47"``."""
    withheld: tuple[WithheldCell, ...] = ()
    """Withheld cells, in the order they were decided (primary, earlier, complementary)."""
    total_withheld: bool = False
    """True when no choice of cells protects the primary ones: the total is withheld too."""
    reason: str = ""
    """Why the total is withheld (empty otherwise)."""
    already_known: tuple[str, ...] = ()
    """Withheld cells whose counts an earlier publication already showed unchanged."""

    @property
    def ids(self) -> frozenset[str]:
        """The withheld districts."""
        return frozenset(c.district_id for c in self.withheld)

    def rule_of(self, district_id: str) -> Rule | None:
        """The rule that withheld ``district_id`` (None when it is shown)."""
        return next((c.rule for c in self.withheld if c.district_id == district_id), None)

    @property
    def n_primary(self) -> int:
        """Cells withheld by a primary rule."""
        return sum(1 for c in self.withheld if c.rule.is_primary)

    @property
    def n_complementary(self) -> int:
        """Cells withheld only to protect others (complementary or kept from earlier)."""
        return len(self.withheld) - self.n_primary


@dataclasses.dataclass(frozen=True)
class DisclosureDecision:
    """The decisions for this week and last week, with the rules that made them."""

    rules: DisclosureRules
    this_week: GroupDecision
    prior_week: GroupDecision

    @property
    def any_withheld(self) -> bool:
        """True when anything at all is withheld."""
        return bool(
            self.this_week.withheld
            or self.prior_week.withheld
            or self.this_week.total_withheld
            or self.prior_week.total_withheld
        )


def primary_rule(ili: int, visits: int, rules: DisclosureRules) -> Rule | None:
    """The primary rule that withholds a cell, or None when it may be shown.

    >>> r = DisclosureRules(min_visits=50, min_count=5)
    >>> primary_rule(1, 27, r), primary_rule(3, 900, r), primary_rule(0, 900, r), primary_rule(5, 50, r)
    (<Rule.FEW_VISITS: 'few-visits'>, <Rule.SMALL_COUNT: 'small-count'>, None, None)

    A district that reported no visits at all has nothing to protect (no rate,
    no person counted) and is shown as reporting zero visits.
    """
    if visits == 0:
        return None
    if visits < rules.min_visits:
        return Rule.FEW_VISITS
    if 1 <= ili < rules.min_count:
        return Rule.SMALL_COUNT
    if ili == 0 and rules.suppress_zero:
        return Rule.ZERO_COUNT
    return None


def _unknown(
    cells: Mapping[str, Cell], withheld: Iterable[str], known: Mapping[str, tuple[int, int]]
) -> list[Cell]:
    """Withheld cells whose counts the reader cannot take from an earlier publication."""
    out = []
    for i in withheld:
        c = cells[i]
        if known.get(i) != (c.ili, c.visits):
            out.append(c)
    return out


def group_is_protected(
    cells: Sequence[Cell],
    withheld: Iterable[str],
    rules: DisclosureRules,
    known: Mapping[str, tuple[int, int]] | None = None,
) -> bool:
    """Whether the published total leaves every withheld cell undetermined.

    The reader gets the withheld cells' summed ILI and visit counts (total
    minus shown cells). That is safe when nothing is withheld, or when the
    withheld cells not already known from ``known`` are at least two and
    together hold at least ``rules.min_visits`` visits and
    ``rules.min_withheld_count`` ILI visits.
    """
    by_id = {c.district_id: c for c in cells}
    ids = [i for i in dict.fromkeys(withheld) if i in by_id]
    if not ids:
        return True
    unknown = _unknown(by_id, ids, known or {})
    if not unknown:
        return True
    return (
        len(unknown) >= 2
        and sum(c.visits for c in unknown) >= rules.min_visits
        and sum(c.ili for c in unknown) >= rules.min_withheld_count
    )


def protect_group(
    cells: Sequence[Cell],
    rules: DisclosureRules,
    *,
    label: str,
    carried: Iterable[str] = (),
    known: Mapping[str, tuple[int, int]] | None = None,
    prefer: Iterable[str] = (),
) -> GroupDecision:
    """Primary, earlier and complementary suppression of one group.

    Parameters
    ----------
    cells : sequence of Cell
        Every district with counts in the week (their sum is the published total).
    rules : DisclosureRules
    label : str
        The week label, kept in the record.
    carried : iterable of str
        Districts withheld by an earlier publication of this week; they stay withheld.
    known : mapping of str to (ILI, visits)
        Counts of this week an earlier publication showed (a reissue's earlier
        versions, last week's report); a withheld cell with the same counts now
        protects nothing.
    prefer : iterable of str
        Districts to withhold first when a complement is needed (e.g. those
        withheld in the other week), before the fewest-visits order.

    Returns
    -------
    GroupDecision
        Cells in a stable order; ``total_withheld`` when no choice protects them.
    """
    known = dict(known or {})
    by_id: dict[str, Cell] = {}
    for c in cells:
        if c.district_id in by_id:
            raise ValueError(f"district {c.district_id} appears twice in group {label}")
        by_id[c.district_id] = c
    withheld: dict[str, Rule] = {}
    for c in cells:
        rule = primary_rule(c.ili, c.visits, rules)
        if rule is not None:
            withheld[c.district_id] = rule
    for i in carried:
        if i in by_id and i not in withheld:
            withheld[i] = Rule.EARLIER
    preferred = set(prefer)

    def order(c: Cell) -> tuple[bool, int, int, str]:
        return (c.district_id not in preferred, c.visits, -c.ili, c.district_id)

    candidates = sorted(
        (
            c
            for c in cells
            if c.district_id not in withheld
            and c.visits > 0
            and known.get(c.district_id) != (c.ili, c.visits)
        ),
        key=order,
    )
    total_withheld = False
    reason = ""
    while not group_is_protected(cells, withheld, rules, known):
        if not candidates:
            total_withheld = True
            reason = _impossible_reason(cells, rules)
            break
        withheld[candidates.pop(0).district_id] = Rule.COMPLEMENTARY
    already = tuple(sorted(i for i in withheld if known.get(i) == (by_id[i].ili, by_id[i].visits)))
    return GroupDecision(
        label=label,
        withheld=tuple(WithheldCell(i, r) for i, r in withheld.items()),
        total_withheld=total_withheld,
        reason=reason,
        already_known=already,
    )


def _impossible_reason(cells: Sequence[Cell], rules: DisclosureRules) -> str:
    if len(cells) < 2:
        return "fewer than two districts have counts, so the total is one district's count"
    if sum(c.visits for c in cells) < rules.min_visits:
        return f"the whole jurisdiction had fewer than {rules.min_visits} visits"
    return f"the whole jurisdiction had fewer than {rules.min_withheld_count} ILI visits"


@dataclasses.dataclass(frozen=True)
class Earlier:
    """What earlier publications showed of one week (read from archived results).

    ``withheld`` are districts an earlier publication withheld; ``shown`` the
    (ILI, visits) counts it printed for the others.
    """

    withheld: frozenset[str] = frozenset()
    shown: tuple[tuple[str, int, int], ...] = ()

    @property
    def known(self) -> dict[str, tuple[int, int]]:
        """``{district: (ILI, visits)}`` as printed earlier."""
        return {i: (x, n) for i, x, n in self.shown}

    def merged(self, other: Earlier) -> Earlier:
        """Both publications: withheld in either; shown counts of either (the later wins)."""
        known = self.known
        known.update(other.known)
        return Earlier(
            self.withheld | other.withheld,
            tuple(sorted((i, x, n) for i, (x, n) in known.items())),
        )


def decide(
    this_week: Sequence[Cell],
    prior_week: Sequence[Cell],
    rules: DisclosureRules,
    *,
    labels: tuple[str, str],
    earlier_this: Earlier | None = None,
    earlier_prior: Earlier | None = None,
) -> DisclosureDecision:
    """The decisions of this week and last week (``labels``: their week labels).

    Each week is its own group (its jurisdiction total is published). When a
    complement is needed, districts withheld by a primary rule in the other
    week are taken first: their change is blanked anyway, so less is lost.
    """
    earlier_this = earlier_this or Earlier()
    earlier_prior = earlier_prior or Earlier()
    primary_now = {c.district_id for c in this_week if primary_rule(c.ili, c.visits, rules)}
    primary_before = {c.district_id for c in prior_week if primary_rule(c.ili, c.visits, rules)}
    now = protect_group(
        this_week,
        rules,
        label=labels[0],
        carried=sorted(earlier_this.withheld),
        known=earlier_this.known,
        prefer=primary_before | earlier_prior.withheld,
    )
    before = protect_group(
        prior_week,
        rules,
        label=labels[1],
        carried=sorted(earlier_prior.withheld),
        known=earlier_prior.known,
        prefer=primary_now | now.ids,
    )
    return DisclosureDecision(rules=rules, this_week=now, prior_week=before)
