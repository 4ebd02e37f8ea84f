"""Value rules on one count table and cross-table rules against last week's table.

Pure functions (no I/O): they take the typed tables made by
:mod:`sitrep.ingest.read` and return a :class:`~sitrep.model.ValidationReport`.
The rules themselves, one function each, are listed with their ids and
severities in :data:`sitrep.ingest.rules.REGISTRY` (documented in
docs/rules.md); this module runs them. Error-level findings block the run;
warnings go into the report's data-quality section. Methods follow
docs/methods.md section 9.4 (common practice).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Iterable

from sitrep.config import ValidationSettings
from sitrep.ingest.facts import PairFacts, TableFacts, arrays
from sitrep.ingest.findings import sort_findings
from sitrep.ingest.rules import Rule, Stage, descriptions, rules_of
from sitrep.model import CountTable, Districts, Finding, ValidationReport

__all__ = ["RULES", "validate_against_prior", "validate_table"]

RULES: tuple[tuple[str, str], ...] = descriptions(Stage.TABLE, Stage.PRIOR)
"""Rule ids of this module with one-line descriptions (from the registry)."""


def _run(rules: Iterable[Rule], facts: object, file: str) -> ValidationReport:
    """Findings of each rule's check on ``facts``, in the project's stable order."""
    found: list[Finding] = []
    for rule in rules:
        assert rule.check is not None
        hits = [h.finding(rule.severity, rule.code, file) for h in rule.check(facts)]
        found += hits
        if hits and rule.stops:
            break
    return ValidationReport(sort_findings(found))


def validate_table(
    table: CountTable,
    districts: Districts | None,
    settings: ValidationSettings,
    *,
    weekly_file: bool = False,
    today: dt.date | None = None,
    season_start_week: int = 40,
    latest_week_rules: bool = True,
    prior: CountTable | None = None,
    weekly_inferred: bool = False,
) -> ValidationReport:
    """Check the values of one count table (validation stage 2).

    Runs every rule of :attr:`Stage.TABLE <sitrep.ingest.rules.Stage.TABLE>`
    in the registry (docs/rules.md); each rule's function says what it checks.

    Parameters
    ----------
    table : CountTable
        The typed table from :func:`sitrep.ingest.read.read_count_table`.
    districts : Districts or None
        The checked boundaries; ``None`` skips the boundary rules.
    settings : ValidationSettings
        Thresholds (rate tolerance, value-spike limits).
    weekly_file : bool, optional
        The file is declared to hold one week only.
    today : datetime.date or None, optional
        Today's date for the future-week rule (passed in, never read from the
        clock here); ``None`` skips the rule.
    season_start_week : int, optional
        First week of the season (``weeks.season_start_week``).
    latest_week_rules : bool, optional
        Run the rules about the latest week (those marked ``latest_week`` in
        the registry). Pass False for the history file, whose last week is not
        the report week.
    prior : CountTable or None, optional
        Last week's table as received: the value-spike rule takes the weeks
        this table lacks from it (a one-week extract has no past weeks).
    weekly_inferred : bool, optional
        ``weekly_file`` was inferred from a one-week prior file rather than
        declared (the week-mixed message says which).

    Returns
    -------
    ValidationReport
        Findings sorted by file, line, column and rule.
    """
    a = arrays(table)
    if len(a.ids) == 0:
        return ValidationReport()
    facts = TableFacts(
        a,
        districts,
        settings,
        weekly_file=weekly_file,
        weekly_inferred=weekly_inferred,
        today=today,
        season_start_week=season_start_week,
        latest_week_rules=latest_week_rules,
        prior=arrays(prior) if prior is not None and latest_week_rules else None,
    )
    rules = [r for r in rules_of(Stage.TABLE) if latest_week_rules or not r.latest_week]
    return _run(rules, facts, a.file)


def validate_against_prior(
    current: CountTable, prior: CountTable, settings: ValidationSettings
) -> ValidationReport:
    """Compare this week's table with last week's table as it was received.

    Runs every rule of :attr:`Stage.PRIOR <sitrep.ingest.rules.Stage.PRIOR>`
    in the registry (docs/rules.md); a rule marked ``stops``
    (``week-system-differs``) ends the comparison when it fires.

    Parameters
    ----------
    current : CountTable
        This week's table.
    prior : CountTable
        Last week's table as received then.
    settings : ValidationSettings
        Thresholds of the revision and completeness rules.

    Returns
    -------
    ValidationReport
        Findings (on the current table's file) sorted by file, line, column, rule.
    """
    cur, pri = arrays(current), arrays(prior)
    if not cur.weeks or not pri.weeks:
        return ValidationReport()
    return _run(rules_of(Stage.PRIOR), PairFacts(cur, pri, settings), cur.file)
