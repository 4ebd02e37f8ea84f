"""Configuration: one TOML file, loaded in one place, unknown keys rejected.

``load_config(path)`` is the only function in sitrep that reads settings; every
other module receives the frozen :class:`Config` (or one of its sections).
Relative paths in the file are resolved against the file's own folder.
The commented example ``demo_inputs/sitrep.toml`` documents every key.
"""

from __future__ import annotations

import dataclasses
import tomllib
import types
import typing
from pathlib import Path
from typing import Any, Literal, get_args, get_origin

from sitrep.errors import ConfigError

__all__ = [
    "AnalysisSettings",
    "ColumnMap",
    "Config",
    "DeliverySettings",
    "EmailSettings",
    "InputSettings",
    "NowcastSettings",
    "OutputSettings",
    "ReportSettings",
    "SeasonalSettings",
    "ValidationSettings",
    "WeekSettings",
    "config_from_dict",
    "load_config",
]


@dataclasses.dataclass(frozen=True)
class ColumnMap:
    """Which column of the rate table holds what (names as in the file)."""

    district_id: str = "district_id"
    district_name: str | None = "district_name"
    week: str | None = "epi_week"
    """An epi-week label column such as ``2026-W47``; or use year + week_number, or a date."""
    year: str | None = None
    week_number: str | None = None
    week_start: str | None = None
    week_end: str | None = None
    reporting_sites: str | None = "reporting_sites"
    ili_visits: str = "ili_visits"
    total_visits: str = "total_visits"
    rate: str | None = None
    """Optional supplied rate column, checked against the counts."""
    rate_scale: Literal["percent", "per_1000"] = "percent"


@dataclasses.dataclass(frozen=True)
class InputSettings:
    """Where this week's inputs are and how to read them."""

    table: Path | None = None
    """This week's extract (one week, or season to date)."""
    prior_table: Path | None = None
    """Last week's extract, as it was received."""
    history: Path | None = None
    """Past seasons' weekly counts, same columns (for baselines and thresholds)."""
    boundaries: Path | None = None
    boundaries_layer: str | None = None
    boundaries_id_column: str = "district_id"
    boundaries_name_column: str | None = "district_name"
    boundaries_crs: str | None = None
    """Declare the CRS when the file carries none (never guessed)."""
    boundaries_extent: tuple[float, float, float, float] | None = None
    """Expected extent ``[west, south, east, north]`` in WGS 84 degrees; the layer must lie inside."""
    map_crs: str | None = None
    """Projected CRS for maps and distances (e.g. ``EPSG:3035``); default: the boundaries' own
    CRS when it is projected, else one estimated from the layer (see ``sitrep.ingest.geometry``)."""
    inbox: Path | None = None
    """Folder searched by ``sitrep run`` for the newest extract."""
    inbox_pattern: str = "*.csv"
    encoding: str = "utf-8"
    delimiter: str = ","
    decimal: Literal[".", ","] = "."
    sheet: str | None = None
    """Worksheet name for XLSX tables (first sheet when unset)."""
    date_format: str | None = None
    """How week start/end dates are written when not ISO ``YYYY-MM-DD``, as a
    :func:`datetime.datetime.strptime` pattern such as ``"%m/%d/%Y"`` (declared, never guessed)."""
    strip_id_whitespace: bool = True
    id_zero_pad: int | None = None
    """Pad all-digit district ids shorter than this many digits with leading zeros (table and
    boundaries), e.g. for ids a spreadsheet stored as numbers; unset: ids are used as read."""
    weekly_file: bool | None = None
    """The table holds one week only (true) or the season to date (false); unset: one week when
    last week's file (prior_table) holds one week, else season to date."""
    max_input_mb: float = 200.0
    past_extracts: Path | None = None
    """Folder of earlier weekly extracts as they were received (files matching ``inbox_pattern``,
    read like ``table``), used with the archived ones for the nowcast; unset: the archive only."""
    columns: ColumnMap = dataclasses.field(default_factory=ColumnMap)


@dataclasses.dataclass(frozen=True)
class WeekSettings:
    """The week-numbering convention and the season window."""

    system: Literal["mmwr", "iso"] = "mmwr"
    season_start_week: int = 40
    report_week: str | None = None
    """Report this week (label like ``2026-W47``); default: the latest week in the table."""


@dataclasses.dataclass(frozen=True)
class ValidationSettings:
    """Thresholds of the warning rules."""

    revision_report_pp: float = 0.5
    """List each revision of a past ILI% larger than this many percentage points."""
    revision_report_share: float = 0.10
    """... or a change in total visits larger than this share."""
    completeness_drop_share: float = 0.30
    """Warn when total visits or reporting sites fall by more than this share."""
    spike_robust_z: float = 5.0
    """Robust z above which a value is flagged: against the district's previous weeks scaled by
    the other districts' movement, and against the other districts' changes (both must exceed)."""
    spike_min_weeks: int = 5
    """Fewest of the previous 8 weeks for their median to be the spike rule's reference; with
    fewer, the latest previous week (from this table or last week's) is the reference."""
    spike_mad_floor_pp: float = 0.2
    """Smallest spread used by the spike rule, in percentage points (common practice)."""
    rate_tolerance_pp: float = 0.05
    """Allowed difference between a supplied rate column and the counts."""


@dataclasses.dataclass(frozen=True)
class AnalysisSettings:
    """Settings of the weekly statistics."""

    confidence: float = 0.95
    interval: Literal["wilson", "clopper-pearson"] = "wilson"
    min_visits: int = 30
    """A district with fewer visits in a week is withheld that week (primary suppression)."""
    min_count: int = 5
    """A district whose ILI count is 1 to min_count - 1 is withheld (0 switches the rule off)."""
    suppress_zero: bool = False
    """Also withhold a zero ILI count."""
    change_test: Literal["pooled-z", "poisson-score"] = "pooled-z"
    change_alpha: float = 0.05
    min_change_pp: float = 0.5
    weights: Literal["queen", "rook", "knn"] = "queen"
    knn_k: int = 5
    link_islands_k: int = 0
    """When > 0, link each island to its k nearest districts (and say so)."""
    permutations: int = 9999
    seed: int = 12345
    alpha: float = 0.05
    correction: Literal["fdr_bh", "none"] = "fdr_bh"
    fdr_q: float = 0.05
    cluster_variable: Literal["ili_percent", "eb_rate"] = "ili_percent"


@dataclasses.dataclass(frozen=True)
class SeasonalSettings:
    """Baselines, epidemic thresholds and aberration flags."""

    baseline_seasons: int = 3
    baseline_sd: float = 2.0
    mem_delta: float = 2.8
    mem_form: Literal["point", "ci"] = "point"
    mem_max_seasons: int = 10
    mem_window_end_week: int = 20
    """Last calendar week of each past season used for the epidemic thresholds (0: the whole season)."""
    onset_weeks: int = 3
    aberration_sd_floor_pp: float = 0.2


@dataclasses.dataclass(frozen=True)
class NowcastSettings:
    """Correction of the latest weeks for late reports (docs/methods.md section 12)."""

    enabled: bool = True
    weeks: int = 4
    """How many of the latest weeks are nowcast (this week and the weeks before it)."""
    max_delay: int = 4
    """Delay in weeks after which a week's counts are taken as final."""
    window_weeks: int = 26
    """Development factors come from the weeks of this many latest weeks."""
    min_extracts: int = 10
    """Fewest weekly extracts in the window (this week's included) for a nowcast; else skipped."""
    district_min_weeks: int = 12
    """A district with this many weeks at every delay gets its own factors; others use the pooled."""
    level: float = 0.90
    """Coverage of the prediction interval."""
    draws: int = 2000
    """Simulated draws behind the interval (seeded by analysis.seed)."""


@dataclasses.dataclass(frozen=True)
class ReportSettings:
    """Text of the report."""

    jurisdiction: str = "Unnamed jurisdiction"
    title: str = "Weekly influenza-like illness situation report"
    contact: str = ""
    page_size: Literal["A4", "Letter"] = "A4"
    template_dir: Path | None = None
    """Use templates from this folder instead of the packaged ones."""
    version: str = "1"
    """Shown only for a report that is not archived; an archived report shows its archive version."""
    top_districts_in_pdf: int = 15
    case_definition: str = ""
    """The ILI case definition the reporting sites use, quoted in the cautions."""
    draft_names_groups: bool = False
    """Name the districts of a high-value group in the communications draft."""


@dataclasses.dataclass(frozen=True)
class OutputSettings:
    """Where files go."""

    folder: Path = Path("sitrep-out")
    archive: Path | None = None
    """Archive root; bundles go to ARCHIVE/<jurisdiction>/<year>-W<ww>/v<k>/."""
    copy_inputs: bool = True
    pdf: bool = True
    pdf_variant: str | None = "pdf/ua-1"
    """WeasyPrint's PDF variant: "pdf/ua-1" (default) writes a tagged PDF with a structure tree for
    screen readers; "pdf/a-3b" an archival PDF with results.csv attached; "none" a plain PDF."""
    keep_suppressed_values: bool = False
    """Also write the true values of withheld districts, only into the bundle's internal file
    internal-results-UNSUPPRESSED.csv (never attached or e-mailed)."""
    signing_key: Path | None = None
    """Ed25519 private key that signs each bundle's manifest (``sitrep keys init``); kept outside
    the archive. ``$SITREP_SIGNING_KEY`` (a path) overrides it."""
    trusted_keys: tuple[Path, ...] = ()
    """Public keys ``sitrep verify --config`` accepts signatures from (old ones too, after a rotation)."""


@dataclasses.dataclass(frozen=True)
class EmailSettings:
    """SMTP delivery (credentials come from environment variables named here)."""

    enabled: bool = False
    host: str = "localhost"
    port: int = 587
    security: Literal["starttls", "tls", "none"] = "starttls"
    username_env: str | None = None
    password_env: str | None = None
    sender: str = ""
    recipients: tuple[str, ...] = ()
    reply_to: str | None = None
    subject_prefix: str = ""
    timeout_s: float = 30.0
    retries: int = 3
    retry_backoff_s: float = 30.0


ReviewPolicy = Literal["always", "on-warnings", "never"]


@dataclasses.dataclass(frozen=True)
class DeliverySettings:
    """Whether a built report needs a person's sign-off before it is e-mailed."""

    require_review: ReviewPolicy = "on-warnings"
    """``"always"``: every bundle waits for ``sitrep approve``; ``"on-warnings"``: a bundle
    waits when a data-quality warning concerns a district named on page 1 or the jurisdiction
    as a whole; ``"never"``: bundles are sent as soon as they are built."""
    reviewer: str = ""
    """Who signs off a held report (a name or a role), named in the held message."""


@dataclasses.dataclass(frozen=True)
class Config:
    """The whole configuration of one jurisdiction's weekly report."""

    report: ReportSettings = dataclasses.field(default_factory=ReportSettings)
    input: InputSettings = dataclasses.field(default_factory=InputSettings)
    weeks: WeekSettings = dataclasses.field(default_factory=WeekSettings)
    validation: ValidationSettings = dataclasses.field(default_factory=ValidationSettings)
    analysis: AnalysisSettings = dataclasses.field(default_factory=AnalysisSettings)
    seasonal: SeasonalSettings = dataclasses.field(default_factory=SeasonalSettings)
    nowcast: NowcastSettings = dataclasses.field(default_factory=NowcastSettings)
    output: OutputSettings = dataclasses.field(default_factory=OutputSettings)
    email: EmailSettings = dataclasses.field(default_factory=EmailSettings)
    delivery: DeliverySettings = dataclasses.field(default_factory=DeliverySettings)
    source: Path | None = None
    """The file this configuration was read from (set by :func:`load_config`)."""

    def as_dict(self) -> dict[str, Any]:
        """Every parameter, JSON-ready (for the manifest)."""
        return _jsonable(dataclasses.asdict(self))


def _jsonable(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, Path):
        return str(value)
    return value


def load_config(path: str | Path) -> Config:
    """Read and check a TOML configuration file.

    Raises
    ------
    ConfigError
        If the file is missing or not TOML, a key is unknown, or a value has
        the wrong type or is not one of the allowed choices. The message names
        the key, what was expected and what was found.
    """
    path = Path(path)
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError as exc:
        raise ConfigError(f"configuration file {path} not found") from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"cannot read configuration file {path}: {exc}") from exc
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path} is not valid TOML: {exc}") from exc
    config = config_from_dict(raw, base_dir=path.resolve().parent)
    return dataclasses.replace(config, source=path.resolve())


_WEEK_SOURCES = (("week",), ("year", "week_number"), ("week_start",), ("week_end",))
"""The ways of giving the week in ``input.columns``; a configuration sets at most one."""


def config_from_dict(raw: dict[str, Any], base_dir: Path | None = None) -> Config:
    """Build a :class:`Config` from a parsed TOML mapping (see :func:`load_config`)."""
    raw = dict(raw)
    raw.pop("source", None)
    _check_week_sources(raw)
    config = _build(Config, raw, "", base_dir or Path.cwd())
    _check_ranges(config)
    return config


def _build(cls: type[Any], raw: Any, where: str, base_dir: Path) -> Any:
    if not isinstance(raw, dict):
        raise ConfigError(f"[{where}] must be a table of keys, got {type(raw).__name__}")
    fields = {f.name: f for f in dataclasses.fields(cls) if f.name != "source"}
    unknown = sorted(set(raw) - set(fields))
    if where == "analysis" and "keep_suppressed_values" in unknown:
        raise ConfigError(
            "analysis.keep_suppressed_values has moved: set keep_suppressed_values in [output] "
            "(true values then go only to the internal file internal-results-UNSUPPRESSED.csv)"
        )
    if unknown:
        place = f"[{where}]" if where else "the top level"
        raise ConfigError(
            f"unknown key {unknown[0]!r} in {place}"
            + (f" (and {', '.join(map(repr, unknown[1:]))})" if unknown[1:] else "")
            + f"; known keys: {', '.join(sorted(fields))}"
        )
    hints = typing.get_type_hints(cls)
    values = {
        name: _coerce(hints[name], raw[name], f"{where}.{name}".lstrip("."), base_dir)
        for name in fields
        if name in raw
    }
    return cls(**values)


def _coerce(hint: Any, value: Any, key: str, base_dir: Path) -> Any:
    origin = get_origin(hint)
    if dataclasses.is_dataclass(hint):
        return _build(hint, value, key, base_dir)  # type: ignore[arg-type]
    if origin in (types.UnionType, typing.Union):
        options = [a for a in get_args(hint) if a is not type(None)]
        return _coerce(options[0], value, key, base_dir)
    if origin is Literal:
        allowed = get_args(hint)
        if value not in allowed:
            raise ConfigError(
                f"{key} = {value!r} is not allowed; choose one of {', '.join(map(repr, allowed))}"
            )
        return value
    if hint is Path:
        if not isinstance(value, str) or not value:
            raise ConfigError(f"{key} must be a non-empty path string, got {value!r}")
        _reject_control(key, value)
        p = Path(value).expanduser()
        return p if p.is_absolute() else (base_dir / p)
    if origin is tuple and get_args(hint) and all(a is float for a in get_args(hint)):
        size = len(get_args(hint))
        if (
            not isinstance(value, list)
            or len(value) != size
            or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)
        ):
            raise ConfigError(f"{key} must be a list of {size} numbers, got {value!r}")
        return tuple(float(v) for v in value)
    if origin is tuple and get_args(hint) == (Path, Ellipsis):
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list):
            raise ConfigError(f"{key} must be a list of path strings, got {value!r}")
        return tuple(_coerce(Path, v, key, base_dir) for v in value)
    if origin is tuple:
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise ConfigError(f"{key} must be a list of strings, got {value!r}")
        for v in value:
            _reject_control(key, v)
        return tuple(value)
    if hint is bool:
        if not isinstance(value, bool):
            raise ConfigError(f"{key} must be true or false, got {value!r}")
        return value
    if hint is int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise ConfigError(f"{key} must be a whole number, got {value!r}")
        return value
    if hint is float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ConfigError(f"{key} must be a number, got {value!r}")
        return float(value)
    if hint is str:
        if not isinstance(value, str):
            raise ConfigError(f"{key} must be a string, got {value!r}")
        _reject_control(key, value)
        return value
    raise ConfigError(f"{key}: unsupported setting type {hint!r}")  # pragma: no cover


def _check_week_sources(raw: dict[str, Any]) -> None:
    """Refuse two week sources set in the file (e.g. ``week`` and ``week_end``), naming both."""
    section = raw.get("input")
    columns = section.get("columns") if isinstance(section, dict) else None
    if not isinstance(columns, dict):
        return
    given = [keys for keys in _WEEK_SOURCES if any(columns.get(k) not in (None, "") for k in keys)]
    if len(given) > 1:
        named = [" + ".join(f"input.columns.{k}" for k in keys) for keys in given]
        raise ConfigError(
            f"{' and '.join(named)} both give the week; keep exactly one of them (a week label, "
            "year + week_number, week_start or week_end) and remove the other"
        )


def _reject_control(key: str, value: str) -> None:
    """Refuse CR, LF and NUL in any string: they could inject e-mail headers or paths."""
    bad = [c for c in ("\r", "\n", "\x00") if c in value]
    if bad:
        raise ConfigError(f"{key} contains a control character ({bad[0]!r}); remove it")


def _check_ranges(c: Config) -> None:
    a = c.analysis
    checks = [
        (0 < a.confidence < 1, "analysis.confidence must be between 0 and 1", a.confidence),
        (a.permutations >= 99, "analysis.permutations must be at least 99", a.permutations),
        (0 < a.alpha < 1, "analysis.alpha must be between 0 and 1", a.alpha),
        (0 < a.fdr_q < 1, "analysis.fdr_q must be between 0 and 1", a.fdr_q),
        (0 < a.change_alpha < 1, "analysis.change_alpha must be between 0 and 1", a.change_alpha),
        (a.min_visits >= 0, "analysis.min_visits must not be negative", a.min_visits),
        (a.min_count >= 0, "analysis.min_count must not be negative", a.min_count),
        (a.min_change_pp >= 0, "analysis.min_change_pp must not be negative", a.min_change_pp),
        (a.knn_k >= 1, "analysis.knn_k must be at least 1", a.knn_k),
        (a.link_islands_k >= 0, "analysis.link_islands_k must not be negative", a.link_islands_k),
        (
            1 <= c.weeks.season_start_week <= 52,
            "weeks.season_start_week must be 1..52",
            c.weeks.season_start_week,
        ),
        (c.input.max_input_mb > 0, "input.max_input_mb must be positive", c.input.max_input_mb),
        (
            c.seasonal.onset_weeks >= 1,
            "seasonal.onset_weeks must be at least 1",
            c.seasonal.onset_weeks,
        ),
        (
            0 <= c.seasonal.mem_window_end_week <= 53
            and c.seasonal.mem_window_end_week != c.weeks.season_start_week,
            "seasonal.mem_window_end_week must be 0 (whole season) or a week 1..53 other than "
            "weeks.season_start_week",
            c.seasonal.mem_window_end_week,
        ),
        (1 <= c.email.port <= 65535, "email.port must be 1..65535", c.email.port),
        (c.email.retries >= 0, "email.retries must not be negative", c.email.retries),
        (
            c.report.top_districts_in_pdf >= 0,
            "report.top_districts_in_pdf must not be negative",
            c.report.top_districts_in_pdf,
        ),
    ]
    for ok, message, value in checks:
        if not ok:
            raise ConfigError(f"{message}, got {value!r}")
    _check_nowcast(c.nowcast)
    if c.input.date_format is not None:
        import datetime as dt

        try:
            probe = dt.date(2026, 11, 28).strftime(c.input.date_format)
            ok = dt.datetime.strptime(probe, c.input.date_format).date() == dt.date(2026, 11, 28)
        except ValueError:
            ok = False
        if not ok:
            raise ConfigError(
                f"input.date_format = {c.input.date_format!r} does not give a full date; use "
                "strptime codes with day, month and year, e.g. '%m/%d/%Y' or '%d.%m.%Y'"
            )
    if c.input.id_zero_pad is not None and not 1 <= c.input.id_zero_pad <= 20:
        raise ConfigError(f"input.id_zero_pad must be 1..20 digits, got {c.input.id_zero_pad!r}")
    if len(c.input.delimiter) != 1:
        raise ConfigError(f"input.delimiter must be one character, got {c.input.delimiter!r}")
    if c.input.delimiter == c.input.decimal:
        raise ConfigError("input.delimiter and input.decimal must differ")
    if c.input.boundaries_extent is not None:
        west, south, east, north = c.input.boundaries_extent
        if not (-180 <= west < east <= 180 and -90 <= south < north <= 90):
            raise ConfigError(
                "input.boundaries_extent must be [west, south, east, north] in degrees with "
                f"west < east within -180..180 and south < north within -90..90, got "
                f"{list(c.input.boundaries_extent)!r}"
            )
    if c.weeks.report_week is not None:
        from sitrep.weeks import EpiWeek, WeekSystem

        try:
            EpiWeek.parse(c.weeks.report_week, WeekSystem(c.weeks.system))
        except ValueError as exc:
            raise ConfigError(f"weeks.report_week: {exc}") from exc


def _check_nowcast(n: NowcastSettings) -> None:
    """Refuse nowcast settings that cannot give a nowcast, naming the key and the bound."""
    checks = [
        (1 <= n.max_delay <= 26, "nowcast.max_delay must be 1..26 weeks", n.max_delay),
        (
            1 <= n.weeks <= n.max_delay,
            f"nowcast.weeks must be 1..nowcast.max_delay ({n.max_delay}): a week older than the "
            "longest delay is final",
            n.weeks,
        ),
        (
            n.window_weeks >= n.max_delay + 2,
            f"nowcast.window_weeks must be at least nowcast.max_delay + 2 ({n.max_delay + 2}) "
            "so that every delay is seen twice",
            n.window_weeks,
        ),
        (
            n.max_delay + 2 <= n.min_extracts <= n.window_weeks,
            f"nowcast.min_extracts must be from nowcast.max_delay + 2 ({n.max_delay + 2}) to "
            f"nowcast.window_weeks ({n.window_weeks})",
            n.min_extracts,
        ),
        (
            n.district_min_weeks >= 3,
            "nowcast.district_min_weeks must be at least 3",
            n.district_min_weeks,
        ),
        (0.5 <= n.level < 1, "nowcast.level must be at least 0.5 and below 1", n.level),
        (n.draws >= 200, "nowcast.draws must be at least 200", n.draws),
    ]
    for ok, message, value in checks:
        if not ok:
            raise ConfigError(f"{message}, got {value!r}")
