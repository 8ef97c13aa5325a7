"""The project config: one TOML file parsed into typed models, with one-line errors.

Every section is a pydantic model that forbids unknown keys and checks scalars strictly: a
quoted number is an error, not a number (TOML has its own integers, floats, booleans and
dates). Paths and dates also load from text. Relative paths are resolved against the folder of
the config file. `load_config` is the only entry point; a `ConfigInvalid` error carries every
problem found, one line each, and prints as the first.
"""

from __future__ import annotations

import hashlib
import json
import tomllib
from datetime import date
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    Strict,
    ValidationError,
    ValidationInfo,
    field_validator,
    model_validator,
)

from demandprep.errors import UserError

IDENTIFIER_PATTERN = r"^[A-Za-z_][A-Za-z0-9_]*$"
Identifier = Annotated[str, Field(pattern=IDENTIFIER_PATTERN)]
# Text is accepted for these (TOML has no path type; a date may be written quoted).
LaxPath = Annotated[Path, Strict(False)]
LaxDate = Annotated[date, Strict(False)]
README_HINT = 'see "Config reference" in README.md.'

RECEIPT_REQUIRED = ("receipt", "store", "sold_at", "sku", "quantity", "amount")
RECEIPT_OPTIONAL = ("line", "card", "discount", "line_kind")
# The build sums quantities and amounts as DECIMAL(18, 6) (sql/market/060): 12 whole digits.
DECIMAL_LIMIT = 999_999_999_999.0
# Settings that do not change how a source's files are read (see FileSource.settings_fingerprint).
NOT_READING_SETTINGS = frozenset({"files", "returns_in_demand"})


class Section(BaseModel):
    """Base for every config section: unknown keys are errors, values are checked strictly."""

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)


def _resolve(path: Path | str, info: ValidationInfo) -> Path:
    base = (info.context or {}).get("base_dir", Path.cwd())
    path = Path(path).expanduser()
    return path if path.is_absolute() else (Path(base) / path)


class ProjectSection(Section):
    name: str = "demandprep-project"
    description: str = ""


class WarehouseSection(Section):
    path: LaxPath = Path("warehouse/demandprep.duckdb")
    memory_limit: str = Field("4GB", pattern=r"^\d+(\.\d+)?\s*(KB|MB|GB|TB|KiB|MiB|GiB|TiB)$")
    threads: int = Field(2, ge=1, le=256)
    temp_directory: LaxPath = Path("warehouse/tmp")
    lock_timeout_seconds: float = Field(30.0, ge=0)

    @field_validator("path", "temp_directory", mode="after")
    @classmethod
    def _absolute(cls, value: Path, info: ValidationInfo) -> Path:
        return _resolve(value, info)


class FileSource(Section):
    """One input: a file or glob, its format and the mapping from our column names to its own."""

    files: list[str] = Field(min_length=1)
    format: Literal["csv", "parquet"] = "csv"
    delimiter: str = Field(",", min_length=1, max_length=1)
    decimal: Literal[".", ","] = "."
    encoding: Literal["utf-8", "utf-16", "latin-1"] = "utf-8"
    header: bool = True
    columns: dict[Identifier, str] = Field(default_factory=dict)
    # refuse a file when more than this share of its lines AND more than this many are quarantined
    reject_limit_fraction: float = Field(0.5, ge=0, le=1)
    reject_limit_lines: int = Field(100, ge=0)

    @field_validator("files", mode="after")
    @classmethod
    def _absolute_globs(cls, value: list[str], info: ValidationInfo) -> list[str]:
        return [str(_resolve(item, info)) for item in value]

    def resolved_files(self) -> list[Path]:
        """Every file matched by the globs, sorted, without duplicates."""
        found: set[Path] = set()
        for pattern in self.files:
            path = Path(pattern)
            anchor = Path(path.anchor)
            found.update(anchor.glob(str(path.relative_to(anchor))))
        return sorted(p for p in found if p.is_file())

    def settings_fingerprint(self) -> str:
        """sha256 of the canonical JSON of the settings that decide how a file is read."""
        settings = self.model_dump(mode="json", exclude=set(NOT_READING_SETTINGS))
        canonical = json.dumps(settings, sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(canonical.encode()).hexdigest()


class ReceiptSource(FileSource):
    timestamp_format: str = "%Y-%m-%d %H:%M:%S"
    timezone: str | None = None
    valid_from: LaxDate | None = None
    valid_to: LaxDate | None = None
    returns_in_demand: bool = False
    # plausibility bounds of one line (absolute values); larger lines are value_out_of_range
    # (the ingest also never lets a value past DECIMAL_LIMIT, whatever these say)
    max_quantity: float = Field(10_000.0, gt=0)
    max_amount: float = Field(1_000_000.0, gt=0)

    @model_validator(mode="after")
    def _required_columns(self) -> ReceiptSource:
        missing = [name for name in RECEIPT_REQUIRED if name not in self.columns]
        unknown = [n for n in self.columns if n not in RECEIPT_REQUIRED + RECEIPT_OPTIONAL]
        if missing:
            raise ValueError(f"columns must map {', '.join(missing)}")
        if unknown:
            allowed = ", ".join(RECEIPT_REQUIRED + RECEIPT_OPTIONAL)
            raise ValueError(f"unknown receipt column {unknown[0]!r}; allowed: {allowed}")
        return self


REFERENCE_REQUIRED: dict[str, tuple[str, ...]] = {
    "catalogue": ("sku", "category"),
    "stores": ("store",),
    "households": ("card",),
    "shelf_prices": ("store", "date", "sku", "price"),
    "market_sizes": ("geography", "period", "size"),
    "cost_shifters": ("period",),
}


class SourcesSection(Section):
    receipts: ReceiptSource
    catalogue: FileSource
    stores: FileSource
    households: FileSource | None = None
    shelf_prices: FileSource | None = None
    market_sizes: FileSource | None = None
    cost_shifters: FileSource | None = None

    @model_validator(mode="after")
    def _reference_columns(self) -> SourcesSection:
        for name, required in REFERENCE_REQUIRED.items():
            source = getattr(self, name)
            missing = [c for c in required if source is not None and c not in source.columns]
            if missing:
                raise ValueError(f"sources.{name}.columns must map {', '.join(missing)}")
        return self


Weekday = Literal["monday", "tuesday", "wednesday", "thursday", "friday", "saturday", "sunday"]


class MarketsSection(Section):
    geography: Identifier = "store"
    period: Literal["day", "week", "month", "quarter"] = "week"
    week_starts_on: Weekday = "monday"
    categories: list[str] = Field(min_length=1)
    # What makes a receipt id one visit: "store_day" when tills restart their numbers every day
    # (a visit is store, business day and receipt, the ingest's duplicate key), "store" when an
    # id is never reused in a store, "chain" when it is never reused anywhere in the chain.
    receipt_ids_unique_per: Literal["store_day", "store", "chain"] = "store_day"


class EquivalentUnit(Section):
    """The unit every quantity is converted to: a weight (e.g. 100 g) or one item (a pack)."""

    kind: Literal["weight", "item"] = "weight"
    grams: float = Field(100.0, gt=0)
    size_column: Identifier = "pack_size"
    unit_column: Identifier = "pack_unit"


class UniverseSection(Section):
    top_n: int | None = Field(None, ge=1)
    min_volume_share: float = Field(0.0, ge=0, lt=1)
    min_market_presence: float = Field(0.0, ge=0, le=1)
    rest: Literal["fringe", "outside"] = "fringe"


class ProductsSection(Section):
    keys: list[Identifier] = Field(min_length=1)
    firm: Identifier = "firm"
    nest: Identifier | None = None
    characteristics: list[Identifier] = Field(default_factory=list)
    equivalent_unit: EquivalentUnit = EquivalentUnit()
    universe: UniverseSection = UniverseSection()


class MarketSizeAssumption(Section):
    """One named market-size assumption; which fields apply depends on the method."""

    method: Literal["visits", "population", "peak_multiple", "table"]
    units_per_visit: float | None = Field(None, gt=0)
    units_per_person_per_day: float | None = Field(None, gt=0)
    population_column: Identifier = "population"
    multiple: float | None = Field(None, gt=0)

    @model_validator(mode="after")
    def _method_parameter(self) -> MarketSizeAssumption:
        needed = {
            "visits": "units_per_visit",
            "population": "units_per_person_per_day",
            "peak_multiple": "multiple",
        }.get(self.method)
        if needed and getattr(self, needed) is None:
            raise ValueError(f"method {self.method!r} needs {needed}")
        return self


class SharesSection(Section):
    outside_share_floor: float = Field(0.05, ge=0, lt=1)
    zero_shares: Literal["drop", "keep", "add_one"] = "drop"


class HausmanInstrument(Section):
    enabled: bool = True
    exclude_same: Identifier | None = None


class CostShifterInstrument(Section):
    join_on: list[Literal["period", "firm", "product"]] = Field(default_factory=lambda: ["period"])
    columns: list[Identifier] = Field(min_length=1)


class InstrumentsSection(Section):
    hausman: HausmanInstrument = HausmanInstrument()
    characteristic_sums: list[Identifier] = Field(default_factory=list)
    differentiation: list[Identifier] = Field(default_factory=list)
    cost_shifters: CostShifterInstrument | None = None
    first_stage_fixed_effects: list[Literal["period", "product"]] = Field(default_factory=list)
    weak_instrument_f: float = Field(10.0, gt=0)


class ChoicesSection(Section):
    enabled: bool = True
    occasions: Literal["category_visits", "all_visits"] = "category_visits"
    choice_set_window_days: int = Field(28, ge=1)
    price_window_days: int = Field(28, ge=1)
    multiple_purchases: Literal["largest_spend", "split", "drop"] = "largest_spend"
    loyalty_smoothing: float = Field(0.8, gt=0, lt=1)
    loyalty_burn_in_days: int = Field(56, ge=0)
    sampled_alternatives: int | None = Field(None, ge=1)
    holdout_fraction: float = Field(0.2, ge=0, lt=1)
    pseudonym_key_env: Identifier = "DEMANDPREP_PSEUDONYM_KEY"
    demographics: list[Identifier] = Field(default_factory=list)


class ExportSection(Section):
    root: LaxPath = Path("builds")
    keep_last: int = Field(5, ge=1)
    extra_formats: list[Literal["csv", "dta"]] = Field(default_factory=list)
    row_group_rows: int = Field(131_072, ge=1_024)

    @field_validator("root", mode="after")
    @classmethod
    def _absolute(cls, value: Path, info: ValidationInfo) -> Path:
        return _resolve(value, info)


class ScheduleSection(Section):
    cron: str = "30 2 * * *"
    timezone: str = "UTC"
    deployment_name: Identifier = "nightly"
    parameters: dict[str, Any] = Field(default_factory=dict)

    @field_validator("cron")
    @classmethod
    def _five_fields(cls, value: str) -> str:
        if len(value.split()) != 5:
            raise ValueError("cron must have five fields (minute hour day month weekday)")
        return value


class ProjectConfig(Section):
    """The whole config file."""

    project: ProjectSection = ProjectSection()
    warehouse: WarehouseSection = WarehouseSection()
    sources: SourcesSection
    markets: MarketsSection
    products: ProductsSection
    market_size: dict[Identifier, MarketSizeAssumption] = Field(min_length=1)
    shares: SharesSection = SharesSection()
    instruments: InstrumentsSection = InstrumentsSection()
    choices: ChoicesSection = ChoicesSection()
    export: ExportSection = ExportSection()
    schedule: ScheduleSection = ScheduleSection()
    config_path: Path | None = Field(None, exclude=True)

    def resolved_dict(self) -> dict[str, Any]:
        """The config with every default filled in and paths absolute, JSON-ready."""
        return json.loads(self.model_dump_json())

    def config_hash(self) -> str:
        """sha256 of the resolved config in canonical JSON."""
        canonical = json.dumps(self.resolved_dict(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(canonical.encode()).hexdigest()


def load_config(path: Path | str, check_files: bool = True) -> ProjectConfig:
    """Read and validate a config file; problems raise UserError naming file and key."""
    path = Path(path).resolve()
    if not path.is_file():
        raise UserError(f"{path}: config file not found.", "create one with `demandprep init`.")
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as error:
        message = f"{path}: not valid TOML ({error})."
        raise UserError(message, "check quoting and brackets.") from None
    return parse_config(raw, path, check_files)


def parse_config(raw: dict[str, Any], path: Path, check_files: bool = True) -> ProjectConfig:
    """Validate an already-parsed TOML mapping read from `path`."""
    try:
        config = ProjectConfig.model_validate(raw, context={"base_dir": path.parent})
    except ValidationError as error:
        raise ConfigInvalid([_problem(item, path) for item in error.errors()]) from None
    config = config.model_copy(update={"config_path": path})
    if check_files:
        _check_files_exist(config, path)
    return config


class ConfigInvalid(UserError):
    """A config that fails validation: prints as its first problem, `problems` holds them all."""

    def __init__(self, problems: list[UserError]) -> None:
        first, more = problems[0], len(problems) - 1
        counted = f"{more} more problem{'s' if more > 1 else ''}"
        note = f"({counted}: `demandprep check` lists them all.)" if more else ""
        super().__init__(first.message, " ".join(filter(None, (first.hint, note))) or None)
        self.problems = problems


# What each pydantic error type means in TOML words (types not listed keep pydantic's message).
EXPECTED_TYPES = {
    "int_type": "an integer",
    "int_from_float": "an integer",
    "float_type": "a number",
    "bool_type": "true or false",
    "string_type": "text in quotes",
    "list_type": "a list in brackets",
    "dict_type": "a table",
    "model_type": "a table",
    "date_type": "a date (YYYY-MM-DD)",
    "date_parsing": "a date (YYYY-MM-DD)",
    "date_from_datetime_parsing": "a date (YYYY-MM-DD)",
    "date_from_datetime_inexact": "a date (YYYY-MM-DD)",
    "path_type": "a path in quotes",
}
BOUNDS = {
    "greater_than": ">",
    "greater_than_equal": ">=",
    "less_than": "<",
    "less_than_equal": "<=",
}
UNQUOTED_TYPES = {"int_type": int, "int_from_float": int, "float_type": float, "bool_type": bool}
UNQUOTED_HINTS = {
    int: "write a whole number.",
    float: "write a number.",
    bool: "write true or false.",
}


def _problem(problem: Any, path: Path) -> UserError:
    """One validation problem as a UserError naming the file, the key, the value and the rule."""
    key = _key_path(problem["loc"])
    kind = problem["type"]
    if kind == "extra_forbidden":
        return UserError(f"{path}: unknown key {key!r}.", _allowed_keys_hint(problem["loc"]))
    if kind == "missing":
        return UserError(f"{path}: missing required key {key!r}.", README_HINT)
    expected = _expected(kind, problem.get("ctx") or {})
    given = problem.get("input")
    if expected is None:
        message = problem["msg"].removeprefix("Value error, ")
        shown = f" (got {_shown(given)})" if isinstance(given, str | int | float) else ""
        return UserError(f"{path}: key {key!r}: {message}{shown}.", README_HINT)
    text = " (text)" if isinstance(given, str) and kind in UNQUOTED_TYPES else ""
    return UserError(
        f"{path}: key {key!r}: got {_shown(given)}{text}, expected {expected}.",
        _type_hint(kind, str(problem["loc"][-1]), given),
    )


def _key_path(location: tuple[Any, ...]) -> str:
    key = ""
    for part in location:
        key += f"[{part}]" if isinstance(part, int) else f".{part}"
    return key.lstrip(".") or "(top level)"


def _expected(kind: str, context: dict[str, Any]) -> str | None:
    if kind in EXPECTED_TYPES:
        return EXPECTED_TYPES[kind]
    if kind == "literal_error":
        return str(context["expected"])
    if kind in BOUNDS:
        bound = next(iter(context.values()))
        return f"a value {BOUNDS[kind]} {bound}"
    if kind == "too_short":
        return f"at least {context['min_length']} item(s)"
    if kind == "string_too_short":
        return f"at least {context['min_length']} character(s)"
    if kind == "string_too_long":
        return f"at most {context['max_length']} character(s)"
    if kind == "string_pattern_mismatch":
        if context.get("pattern") == IDENTIFIER_PATTERN:
            return "a name of letters, digits and underscores, not starting with a digit"
        if "GB" in str(context.get("pattern")):
            return 'a size such as "4GB"'
        return f"text matching {context.get('pattern')}"
    return None


def _shown(value: Any) -> str:
    """A value as the user wrote it in TOML, more or less."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str | int | float):
        return repr(value)
    if isinstance(value, date):
        return value.isoformat()
    if isinstance(value, list):
        return "a list"
    if isinstance(value, dict):
        return "a table"
    return type(value).__name__


def _type_hint(kind: str, name: str, given: Any) -> str:
    if kind in UNQUOTED_TYPES and not isinstance(given, str):
        return UNQUOTED_HINTS[UNQUOTED_TYPES[kind]]
    if kind in UNQUOTED_TYPES:
        example = _unquoted_example(UNQUOTED_TYPES[kind], given)
        shown = f", e.g. {name} = {example}" if example else ""
        return f"write numbers and true/false without quotes{shown}."
    if kind == "string_type":
        return "put text in double quotes."
    if kind == "list_type":
        return 'write a list in brackets, e.g. ["a", "b"].'
    if kind in ("dict_type", "model_type"):
        return f"write it as a table: [{name}] with its keys below."
    if kind.startswith("date"):
        return "write a date as 2024-01-31."
    if kind == "literal_error":
        return "use one of the allowed values."
    if kind in BOUNDS or kind in ("too_short", "string_too_short", "string_too_long"):
        return "pick a value in the allowed range."
    if kind == "string_pattern_mismatch":
        return "write it as the rule says; " + README_HINT
    return README_HINT


def _unquoted_example(kind: type, given: Any) -> str | None:
    if kind is bool:
        return "true"
    try:
        return str(kind(given)) if isinstance(given, str) else None
    except ValueError:
        return None


def _allowed_keys_hint(location: tuple[Any, ...]) -> str:
    model: Any = ProjectConfig
    parts = list(location[:-1])
    while parts:
        field = model.model_fields.get(str(parts.pop(0)))
        if field is None:
            return f"remove it; {README_HINT}"
        if getattr(field.annotation, "__origin__", None) is dict and parts:
            parts.pop(0)  # a user-chosen name such as a market-size assumption
        model = _section_model(field.annotation)
        if model is None:
            return f"remove it; {README_HINT}"
    names = [name for name in model.model_fields if name != "config_path"]
    return f"allowed here: {', '.join(names)}."


def _section_model(annotation: Any) -> Any:
    candidates = [annotation, *getattr(annotation, "__args__", ())]
    for candidate in candidates:
        if isinstance(candidate, type) and issubclass(candidate, BaseModel):
            return candidate
    return None


def _check_files_exist(config: ProjectConfig, path: Path) -> None:
    # once a warehouse exists the ingest decides: a source whose files were archived after
    # their ingest keeps its rows with a warning (ingest.files.check_sources_have_files)
    if config.warehouse.path.exists():
        return
    problems = [
        no_files_error(path, name, source)
        for name, source in config.sources
        if source is not None and not source.resolved_files()
    ]
    if problems:
        raise ConfigInvalid(problems)


def no_files_error(path: Path | None, name: str, source: FileSource) -> UserError:
    """The error of a source whose globs match no file."""
    return UserError(
        f"{path}: key 'sources.{name}.files': no file matches {source.files[0]}.",
        "paths are relative to the config file's folder.",
    )
