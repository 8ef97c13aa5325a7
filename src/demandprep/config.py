"""The project config: one TOML file parsed into typed models, with one-line errors.

Every section is a pydantic model that forbids unknown keys. Relative paths are resolved
against the folder of the config file. `load_config` is the only entry point.
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
    ValidationError,
    ValidationInfo,
    field_validator,
    model_validator,
)

from demandprep.errors import UserError

IDENTIFIER_PATTERN = r"^[A-Za-z_][A-Za-z0-9_]*$"
Identifier = Annotated[str, Field(pattern=IDENTIFIER_PATTERN)]

RECEIPT_REQUIRED = ("receipt", "store", "sold_at", "sku", "quantity", "amount")
RECEIPT_OPTIONAL = ("line", "card", "discount", "line_kind")
# The build sums quantities and amounts as DECIMAL(18, 6) (sql/market/060): 12 whole digits.
DECIMAL_LIMIT = 999_999_999_999.0
# Settings that do not change how a source's files are read (see FileSource.settings_fingerprint).
NOT_READING_SETTINGS = frozenset({"files", "returns_in_demand"})


class Section(BaseModel):
    """Base for every config section: unknown keys are errors, values are checked strictly."""

    model_config = ConfigDict(extra="forbid", frozen=True)


def _resolve(path: Path | str, info: ValidationInfo) -> Path:
    base = (info.context or {}).get("base_dir", Path.cwd())
    path = Path(path).expanduser()
    return path if path.is_absolute() else (Path(base) / path)


class ProjectSection(Section):
    name: str = "demandprep-project"
    description: str = ""


class WarehouseSection(Section):
    path: Path = Path("warehouse/demandprep.duckdb")
    memory_limit: str = Field("4GB", pattern=r"^\d+(\.\d+)?\s*(KB|MB|GB|TB|KiB|MiB|GiB|TiB)$")
    threads: int = Field(2, ge=1, le=256)
    temp_directory: Path = Path("warehouse/tmp")
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
    valid_from: date | None = None
    valid_to: date | None = None
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
    root: Path = Path("builds")
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
        raise UserError(_first_problem(error, path)) from None
    config = config.model_copy(update={"config_path": path})
    if check_files:
        _check_files_exist(config, path)
    return config


def _first_problem(error: ValidationError, path: Path) -> str:
    problem = error.errors()[0]
    key = ".".join(str(part) for part in problem["loc"]) or "(top level)"
    if problem["type"] == "extra_forbidden":
        return f"{path}: unknown key {key!r}. Hint: {_allowed_keys_hint(problem['loc'])}"
    if problem["type"] == "missing":
        return f"{path}: missing required key {key!r}. Hint: see the config reference in README."
    message = problem["msg"].removeprefix("Value error, ")
    given = problem.get("input")
    shown = f" (got {given!r})" if isinstance(given, str | int | float | bool) else ""
    return f"{path}: key {key!r}: {message}{shown}."


def _allowed_keys_hint(location: tuple[Any, ...]) -> str:
    model: Any = ProjectConfig
    parts = list(location[:-1])
    while parts:
        field = model.model_fields.get(str(parts.pop(0)))
        if field is None:
            return "remove it; see the config reference in README."
        if getattr(field.annotation, "__origin__", None) is dict and parts:
            parts.pop(0)  # a user-chosen name such as a market-size assumption
        model = _section_model(field.annotation)
        if model is None:
            return "remove it; see the config reference in README."
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
    for name, source in config.sources:
        if source is None:
            continue
        if not source.resolved_files():
            raise no_files_error(path, name, source)


def no_files_error(path: Path | None, name: str, source: FileSource) -> UserError:
    """The error of a source whose globs match no file."""
    return UserError(
        f"{path}: key 'sources.{name}.files': no file matches {source.files[0]}.",
        "paths are relative to the config file's folder.",
    )
