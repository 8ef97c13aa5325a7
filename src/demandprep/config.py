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
import re
import tomllib
from datetime import date
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    Strict,
    ValidationError,
    ValidationInfo,
    field_validator,
    model_validator,
)
from pydantic.fields import FieldInfo

from demandprep.errors import UserError

IDENTIFIER_PATTERN = r"^[A-Za-z_][A-Za-z0-9_]*$"
Identifier = Annotated[str, Field(pattern=IDENTIFIER_PATTERN)]
# Text is accepted for these (TOML has no path type; a date may be written quoted).
LaxPath = Annotated[Path, Strict(False)]
LaxDate = Annotated[date, Strict(False)]
DOCS_HINT = "see docs/config.md."

# Our receipt columns (the keys of sources.receipts.columns) and what each holds.
RECEIPT_COLUMNS = {
    "receipt": "receipt (ticket) id",
    "line": "line number within the receipt",
    "store": "store id, as in the stores file",
    "sold_at": "time of the scan",
    "sku": "SKU id, as in the catalogue",
    "quantity": "packs, or kg / lb for weight-sold items",
    "amount": "gross line amount, before discounts",
    "card": "loyalty card id; pseudonymised in every export",
    "discount": "line discount (>= 0)",
    "line_kind": "sale, return or void",
}
RECEIPT_REQUIRED = ("receipt", "store", "sold_at", "sku", "quantity", "amount")
RECEIPT_OPTIONAL = tuple(name for name in RECEIPT_COLUMNS if name not in RECEIPT_REQUIRED)
# The build sums quantities and amounts as DECIMAL(18, 6) (sql/market/060): 12 whole digits.
DECIMAL_LIMIT = 999_999_999_999.0
# Settings that do not change how a source's files are read (see FileSource.settings_fingerprint).
NOT_READING_SETTINGS = frozenset({"files", "returns_in_demand"})
# Columns the ingest puts beside our column names while it reads a source (ingest/reader.py's
# source view, ingest/references.py's checked rows and `ref_<table>` storage): a column of ours
# with one of these names would clash with it (tests/test_ingest_own_columns.py).
INGEST_OWN_COLUMNS = frozenset(
    {"ordinal", "path", "line_no", "ingest_trimmed", "reason", "reason_field", "detail", "file_id"}
)


class Section(BaseModel):
    """Base for every config section: unknown keys are errors, values are checked strictly."""

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)


def described(description: str, unit: str = "", **field: Any) -> Any:
    """A config Field with its description (short first sentence) and unit, for docs and hints."""
    return Field(description=description, json_schema_extra={"unit": unit}, **field)


def _resolve(path: Path | str, info: ValidationInfo) -> Path:
    base = (info.context or {}).get("base_dir", Path.cwd())
    path = Path(path).expanduser()
    return path if path.is_absolute() else (Path(base) / path)


class ProjectSection(Section):
    """What the project is called; shown in reports."""

    name: str = described(
        "Project name. Free text, shown in reports.", default="demandprep-project"
    )
    description: str = described("Project description. Free text, shown in reports.", default="")
    currency: str = described(
        "Currency of prices and amounts. Shown in reports (e.g. EUR); empty says 'currency units'.",
        default="",
    )


class WarehouseSection(Section):
    """The embedded DuckDB warehouse: where it lives and what it may use."""

    path: LaxPath = described(
        "DuckDB warehouse file. Relative paths resolve against the config file's folder.",
        default=Path("warehouse/demandprep.duckdb"),
        validate_default=True,
    )
    memory_limit: str = described(
        "Memory the process may use. DuckDB gets it less 256 MiB (at most half) for Python "
        "and spills to temp_directory beyond that; the process peaks a little above it.",
        unit="bytes, with KB, MB, GB, TB, KiB, MiB, GiB or TiB",
        default="4GB",
        pattern=r"^\d+(\.\d+)?\s*(KB|MB|GB|TB|KiB|MiB|GiB|TiB)$",
    )
    threads: int = described("DuckDB worker threads.", unit="threads", default=2, ge=1, le=256)
    temp_directory: LaxPath = described(
        "Where DuckDB spills beyond memory_limit. Relative to the config file's folder.",
        default=Path("warehouse/tmp"),
        validate_default=True,
    )
    lock_timeout_seconds: float = described(
        "How long a second writer waits. A second writer of the warehouse (or of the export "
        "root) waits this long for the first, then stops with a message.",
        unit="seconds",
        default=30.0,
        ge=0,
    )

    @field_validator("path", "temp_directory", mode="after")
    @classmethod
    def _absolute(cls, value: Path, info: ValidationInfo) -> Path:
        return _resolve(value, info)


class FileSource(Section):
    """One input: a file or glob, its format and the mapping from our column names to its own."""

    files: list[str] = described(
        "Files to read, as globs. Relative to the config file's folder; CSV may be plain, .gz "
        "or .zst.",
        min_length=1,
    )
    format: Literal["csv", "parquet"] = described("File format.", default="csv")
    delimiter: str = described(
        "CSV field delimiter. One character.", default=",", min_length=1, max_length=1
    )
    decimal: Literal[".", ","] = described("Decimal mark of numbers in CSV files.", default=".")
    encoding: Literal["utf-8", "utf-16", "latin-1"] = described(
        "Text encoding of CSV files.", default="utf-8"
    )
    header: bool = described("Whether CSV files start with a header line.", default=True)
    columns: dict[Identifier, str] = described(
        "Our column names = the file's column names. A table: each key is our name, each value "
        "the name in your file; the required names depend on the source. Our names are "
        "case-insensitive and cannot be one the ingest gives its own columns: "
        f"{', '.join(sorted(INGEST_OWN_COLUMNS))}.",
        default_factory=dict,
    )
    reject_limit_fraction: float = described(
        "Refuse a file past this share of bad lines. A file is refused whole when more than "
        "this share of its lines AND more than reject_limit_lines of them are quarantined.",
        unit="share 0..1 of a file's lines",
        default=0.5,
        ge=0,
        le=1,
    )
    reject_limit_lines: int = described(
        "Refuse a file past this many bad lines. Both limits must be passed; the count keeps a "
        "small file with a few bad lines from being refused.",
        unit="lines",
        default=100,
        ge=0,
    )

    @field_validator("columns", mode="after")
    @classmethod
    def _names_apart(cls, value: dict[str, str]) -> dict[str, str]:
        """Our names are DuckDB column names: case-insensitive, and apart from the ingest's."""
        seen: dict[str, str] = {}
        for name in value:
            if name.lower() in INGEST_OWN_COLUMNS:
                own = ", ".join(sorted(INGEST_OWN_COLUMNS))
                raise ValueError(
                    f"{name!r} is a name the ingest gives its own columns ({own}); give that "
                    "column another name here and wherever the config names it"
                )
            if name.lower() in seen:
                raise ValueError(
                    f"{seen[name.lower()]!r} and {name!r} differ only in case, which column "
                    "names ignore; give one of them another name"
                )
            seen[name.lower()] = name
        return value

    @field_validator("files", mode="after")
    @classmethod
    def _absolute_globs(cls, value: list[str], info: ValidationInfo) -> list[str]:
        return [str(_resolve(item, info)) for item in value]

    def resolved_files(self) -> list[Path]:
        """Every file matched by the globs, sorted, without duplicates."""
        return sorted(p for p in self._matched_paths() if p.is_file())

    def links_to_no_file(self) -> list[Path]:
        """Symbolic links the globs match that lead to no file (a target gone, or a loop),
        sorted: `resolved_files` leaves them out, so the ingest warns about them."""
        return sorted(p for p in self._matched_paths() if p.is_symlink() and not p.exists())

    def _matched_paths(self) -> set[Path]:
        found: set[Path] = set()
        for pattern in self.files:
            path = Path(pattern)
            anchor = Path(path.anchor)
            found.update(anchor.glob(str(path.relative_to(anchor))))
        return found

    def settings_fingerprint(self) -> str:
        """sha256 of the canonical JSON of the settings that decide how a file is read."""
        settings = self.model_dump(mode="json", exclude=set(NOT_READING_SETTINGS))
        canonical = json.dumps(settings, sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(canonical.encode()).hexdigest()


class ReceiptSource(FileSource):
    """The receipt lines, one row per scanned line."""

    timestamp_format: str = described(
        "strftime format of sold_at. For example %Y-%m-%d %H:%M:%S.",
        default="%Y-%m-%d %H:%M:%S",
    )
    timezone: str | None = described(
        "Timezone sold_at is written in. Set it when timestamps are not local store time "
        "(e.g. UTC); unset means they are.",
        default=None,
    )
    valid_from: LaxDate | None = described(
        "First sale day accepted. Earlier lines are quarantined (timestamp_out_of_range).",
        default=None,
    )
    valid_to: LaxDate | None = described(
        "Last sale day accepted. Later lines are quarantined (timestamp_out_of_range).",
        default=None,
    )
    returns_in_demand: bool = described(
        "Whether returns count in demand. Voids always net against the sale they cancel; "
        "returns are kept with their kind and only net against sales when this is true.",
        default=False,
    )
    max_quantity: float = described(
        "Largest plausible quantity of one line. In absolute value; larger lines are "
        "value_out_of_range (the ingest also stops any value past 12 whole digits).",
        unit="units of the quantity column (packs, kg or lb) per line",
        default=10_000.0,
        gt=0,
    )
    max_amount: float = described(
        "Largest plausible amount or discount of one line. In absolute value; larger lines "
        "are value_out_of_range.",
        unit="currency units per line",
        default=1_000_000.0,
        gt=0,
    )

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
    """The input files, one table per source; each maps our column names to the file's."""

    receipts: ReceiptSource = described(
        "Receipt lines, one per scanned line. Its columns are listed under [sources.receipts]."
    )
    catalogue: FileSource = described(
        "Catalogue, one row per SKU. Also maps the columns the products section names (keys, "
        "firm, nest, characteristics, pack size and unit)."
    )
    stores: FileSource = described(
        "Stores, one row per store. Also maps geography levels and population columns."
    )
    households: FileSource | None = described(
        "Households, one row per loyalty card. Also maps choices.demographics.", default=None
    )
    shelf_prices: FileSource | None = described(
        "Shelf prices per store, date and SKU. May also map promo.",
        default=None,
    )
    market_sizes: FileSource | None = described(
        "Agreed market sizes per geography and period. Sizes in equivalent units, one per "
        "geography and period start; read by the table method.",
        default=None,
    )
    cost_shifters: FileSource | None = described(
        "Cost shifters per period (and firm or product). Also maps firm or product and the "
        "value columns of instruments.cost_shifters.",
        default=None,
    )

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
    """What one market is: a geography and a period, over the categories in scope."""

    geography: Identifier = described(
        "Geography of a market. store, or any column of the stores file (e.g. region).",
        default="store",
    )
    period: Literal["day", "week", "month", "quarter"] = described(
        "Period of a market.", default="week"
    )
    week_starts_on: Weekday = described("First day of a week period.", default="monday")
    categories: list[str] = described(
        "Catalogue categories in scope. Values of the catalogue's category column.",
        min_length=1,
    )
    receipt_ids_unique_per: Literal["store_day", "store", "chain"] = described(
        "What makes a receipt id one visit. store_day when tills restart their numbers every "
        "day (store, business day and receipt, the ingest's duplicate key), store when an id "
        "is never reused in a store, chain when it is never reused anywhere in the chain.",
        default="store_day",
    )


class EquivalentUnit(Section):
    """The unit every quantity is converted to: a weight (e.g. 100 g) or one item (a pack)."""

    kind: Literal["weight", "item"] = described(
        "Weight or item. weight: grams below per unit; item: one pack is one unit.",
        default="weight",
    )
    grams: float = described(
        "Grams in one equivalent unit. Used when kind is weight.", unit="grams", default=100.0, gt=0
    )
    size_column: Identifier = described(
        "Catalogue column of the pack size. In pack_unit units.", default="pack_size"
    )
    unit_column: Identifier = described(
        "Catalogue column of the pack unit. Values g or kg.", default="pack_unit"
    )


class UniverseSection(Section):
    """Which products are kept as inside goods; the rest become the fringe or the outside good."""

    top_n: int | None = described(
        "Keep at most the N largest products. By category volume; unset keeps all that pass "
        "the other rules.",
        unit="products",
        default=None,
        ge=1,
    )
    min_volume_share: float = described(
        "Least share of category volume to keep.",
        unit="share 0..1 of category volume",
        default=0.0,
        ge=0,
        lt=1,
    )
    min_market_presence: float = described(
        "Least share of markets a kept product sells in.",
        unit="share 0..1 of markets",
        default=0.0,
        ge=0,
        le=1,
    )
    rest: Literal["fringe", "outside"] = described(
        "Where products not kept go. fringe: one composite product; outside: the outside good.",
        default="fringe",
    )


class ProductsSection(Section):
    """What one product is, and which catalogue columns describe it."""

    keys: list[Identifier] = described(
        "Catalogue columns defining a product. Their values joined with '|' are the product "
        "id (a value holding '|' stops the build).",
        min_length=1,
    )
    firm: Identifier = described("Catalogue column of the owning firm.", default="firm")
    nest: Identifier | None = described(
        "Catalogue column of the nest. For nested logit; unset for none.", default=None
    )
    characteristics: list[Identifier] = described(
        "Numeric catalogue columns carried along. Into the share table, per product.",
        default_factory=list,
    )
    equivalent_unit: EquivalentUnit = described(
        "Unit quantities are converted to. A table.", default=EquivalentUnit()
    )
    universe: UniverseSection = described(
        "Which products are kept. A table.", default=UniverseSection()
    )


class MarketSizeAssumption(Section):
    """One named market-size assumption; which fields apply depends on the method."""

    method: Literal["visits", "population", "peak_multiple", "table"] = described(
        "How the market size is found. visits: visits x units_per_visit; population: "
        "population x units_per_person_per_day x days in the period; peak_multiple: multiple x "
        "the geography's largest period volume; table: sizes from sources.market_sizes, per "
        "geography and period start."
    )
    units_per_visit: float | None = described(
        "Potential demand per visit. Needed by visits; a visit is a receipt with a sale line, "
        "any category (see markets.receipt_ids_unique_per).",
        unit="equivalent units per visit",
        default=None,
        gt=0,
    )
    units_per_person_per_day: float | None = described(
        "Potential demand per person per day. Needed by population.",
        unit="equivalent units per person per day",
        default=None,
        gt=0,
    )
    population_column: Identifier = described(
        "Stores column of the population. Used by population; summed over the geography.",
        default="population",
    )
    multiple: float | None = described(
        "Factor on the largest period volume. Needed by peak_multiple.",
        unit="times the geography's largest period volume",
        default=None,
        gt=0,
    )

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
    """How shares are computed and checked."""

    outside_share_floor: float = described(
        "Warn below this outside share. Per market.",
        unit="share 0..1",
        default=0.05,
        ge=0,
        lt=1,
    )
    zero_shares: Literal["drop", "keep", "add_one"] = described(
        "What to do with zero-sale product-markets. drop: leave them out (with a warning); "
        "keep: keep them with null logs, flagged; add_one: add one unit to every product and "
        "the outside good.",
        default="drop",
    )


class HausmanInstrument(Section):
    """Other-market prices of the same product (Hausman 1996)."""

    enabled: bool = described("Whether to build Hausman prices.", default=True)
    exclude_same: Identifier | None = described(
        "Stores column whose group is left out. E.g. region: leave the own region out, not "
        "only the own market; unset leaves the own market out.",
        default=None,
    )


class CostShifterInstrument(Section):
    """Cost shifters from sources.cost_shifters joined to product-markets."""

    join_on: list[Literal["period", "firm", "product"]] = described(
        "Keys the shifters are joined on.", default_factory=lambda: ["period"]
    )
    columns: list[Identifier] = described(
        "Value columns used as instruments. Numeric columns of sources.cost_shifters.",
        min_length=1,
    )


FIXED_EFFECT_NAME = re.compile(r"^(period|product|market|[A-Za-z_][A-Za-z0-9_]*:period)$")


def _fixed_effect_name(value: str) -> str:
    if not FIXED_EFFECT_NAME.match(value):
        raise ValueError(
            f"{value!r} is not a fixed effect; use period, product, market or "
            "<stores level>:period (e.g. region:period)"
        )
    return value


FixedEffect = Annotated[str, AfterValidator(_fixed_effect_name)]


class InstrumentsSection(Section):
    """Price instruments added to the share table, and the first-stage check."""

    hausman: HausmanInstrument = described(
        "Hausman other-market prices. A table.", default=HausmanInstrument()
    )
    characteristic_sums: list[Identifier] = described(
        "Characteristics for BLP sums. Sums over the firm's other and the rivals' products; "
        "each must be in products.characteristics.",
        default_factory=list,
    )
    differentiation: list[Identifier] = described(
        "Characteristics for differentiation IVs. Gandhi & Houde (2019) measures; each must be "
        "in products.characteristics.",
        default_factory=list,
    )
    cost_shifters: CostShifterInstrument | None = described(
        "Cost-shifter instruments. A table; unset for none.", default=None
    )
    first_stage_fixed_effects: list[FixedEffect] = described(
        "Fixed effects of the first stage and quick logit. period, product, market, or "
        "<stores level>:period for a geography level the stores source maps (store, region, "
        "chain...), e.g. region:period.",
        default_factory=list,
    )
    weak_instrument_f: float = described(
        "Warn below this first-stage F. A rule of thumb (Staiger & Stock 1997).",
        unit="F statistic",
        default=10.0,
        gt=0,
    )


class ChoicesSection(Section):
    """The chooser-alternative build from loyalty-card visits."""

    enabled: bool = described("Whether to build the choice data.", default=True)
    occasions: Literal["category_visits", "all_visits"] = described(
        "Which visits are choice occasions. category_visits: visits that bought an "
        "alternative; all_visits: every card visit, choosing none when it bought none.",
        default="category_visits",
    )
    choice_set_window_days: int = described(
        "Look-back for a store's choice set. A shelf-price snapshot younger than this, else "
        "what the store sold in this many days before.",
        unit="days",
        default=28,
        ge=1,
    )
    price_window_days: int = described(
        "Look-back for a store's last price. Used when the period has no shelf or sale price.",
        unit="days",
        default=28,
        ge=1,
    )
    multiple_purchases: Literal["largest_spend", "split", "drop"] = described(
        "Visits buying several alternatives. largest_spend: keep the largest; split: one "
        "occasion per product; drop: not an occasion.",
        default="largest_spend",
    )
    loyalty_smoothing: float = described(
        "Lambda of the smoothed loyalty recursion. Guadagni & Little (1983); weight of the past.",
        unit="weight 0..1",
        default=0.8,
        gt=0,
        lt=1,
    )
    loyalty_burn_in_days: int = described(
        "Days that start a chooser's loyalty. After the first occasion; occasions inside are "
        "flagged burn_in.",
        unit="days",
        default=56,
        ge=0,
    )
    sampled_alternatives: int | None = described(
        "Sampled alternatives besides the chosen one. Drawn uniformly per occasion; unset "
        "keeps the whole choice set.",
        unit="alternatives",
        default=None,
        ge=1,
    )
    holdout_fraction: float = described(
        "Share of choosers flagged holdout. Drawn by a keyed hash of the chooser.",
        unit="share 0..1 of choosers",
        default=0.2,
        ge=0,
        lt=1,
    )
    pseudonym_key_env: Identifier = described(
        "Environment variable holding the pseudonym key. The key itself is never in the "
        "config; at least 16 bytes.",
        default="DEMANDPREP_PSEUDONYM_KEY",
    )
    demographics: list[Identifier] = described(
        "Households columns copied to choosers.", default_factory=list
    )


class DemographicDrawsSection(Section):
    """Per-market draws of household demographics, for random-coefficient estimation."""

    draws: int | None = described(
        "Draws per market. Of the choices.demographics columns, from the households that "
        "visited the market weighted by visits; unset builds no demographics file.",
        unit="draws per market",
        default=None,
        ge=1,
        le=100_000,
    )
    seed: int = described(
        "Seed of the draws. Draw d of market m is picked by md5(seed, m, d), so a rebuild "
        "draws the same.",
        default=1,
        ge=0,
    )
    min_households: int = described(
        "Fewest households a market draws from. A market with fewer draws from its geography "
        "over all periods, then from all households.",
        unit="households",
        default=20,
        ge=1,
    )


class ExportSection(Section):
    """Where builds are published and in which formats."""

    root: LaxPath = described(
        "Folder of the build folders. With a latest pointer; relative to the config file's folder.",
        default=Path("builds"),
        validate_default=True,
    )
    keep_last: int = described(
        "Builds kept when pruning. Older marked build folders are removed.",
        unit="builds",
        default=5,
        ge=1,
    )
    extra_formats: list[Literal["csv", "dta"]] = described(
        "Copies besides Parquet. Written to csv/ and dta/ in the build.", default_factory=list
    )
    row_group_rows: int = described(
        "Rows per Parquet row group. Also the rows Python holds at once while writing.",
        unit="rows",
        default=131_072,
        ge=1_024,
    )

    @field_validator("root", mode="after")
    @classmethod
    def _absolute(cls, value: Path, info: ValidationInfo) -> Path:
        return _resolve(value, info)


class PartitioningSection(Section):
    """A partitioned build: per-partition market scans as Prefect tasks on a Dask cluster."""

    by: Identifier | None = described(
        "Stores column that partitions the build. Each of its values is one partition with "
        "its own warehouse; unset: one process builds everything (docs/scaling.md).",
        default=None,
    )
    period_boundaries: list[LaxDate] = described(
        "Dates that start a new period range. Each range between two boundaries is a partition "
        "with each value of by; each date must start a market period. Empty: no period ranges.",
        default_factory=list,
    )
    root: LaxPath = described(
        "Folder of the partition warehouses and summaries. Every Dask worker must see it; "
        "relative to the config file's folder.",
        default=Path("partitions"),
        validate_default=True,
    )
    cluster_address: str | None = described(
        "Dask scheduler address, e.g. tcp://10.0.0.5:8786. Unset: the address in "
        "cluster_address_env, else a local cluster of local_workers processes.",
        default=None,
    )
    cluster_address_env: str = described(
        "Environment variable with the scheduler address. Read when cluster_address is unset.",
        default="DEMANDPREP_DASK_ADDRESS",
        pattern=r"^[A-Za-z_][A-Za-z0-9_]*$",
    )
    local_workers: int = described(
        "Worker processes of the local cluster. Used when no address is given.",
        unit="processes",
        default=2,
        ge=1,
        le=256,
    )
    partition_retries: int = described(
        "Retries of a failed partition task. On top of Dask's own rerun of a lost worker's task.",
        unit="retries",
        default=1,
        ge=0,
        le=10,
    )
    chooser_buckets: int | None = described(
        "Chooser buckets of the choice build. Each is one task on the cluster that builds the "
        "choices of the choosers whose pseudonym falls in it; unset: one per partition.",
        unit="buckets",
        default=None,
        ge=1,
        le=256,
    )

    @field_validator("root", mode="after")
    @classmethod
    def _absolute(cls, value: Path, info: ValidationInfo) -> Path:
        return _resolve(value, info)


class ScheduleSection(Section):
    """The nightly run of `demandprep serve`."""

    cron: str = described(
        "Cron schedule of the nightly run. Five fields: minute hour day month weekday.",
        default="30 2 * * *",
    )
    timezone: str = described("Timezone of the cron schedule.", default="UTC")
    deployment_name: Identifier = described("Name of the Prefect deployment.", default="nightly")
    parameters: dict[str, Any] = described(
        "Extra parameters of the nightly flow. A table of the flow's parameters.",
        default_factory=dict,
    )

    @field_validator("cron")
    @classmethod
    def _five_fields(cls, value: str) -> str:
        if len(value.split()) != 5:
            raise ValueError("cron must have five fields (minute hour day month weekday)")
        return value


# the tables whose defaults hold folders relative to the config file's folder
TABLES_WITH_FOLDERS = ("warehouse", "export", "partitioning")


class ProjectConfig(Section):
    """The whole config file."""

    project: ProjectSection = described("Project name and description.", default=ProjectSection())
    warehouse: WarehouseSection = described("The DuckDB warehouse.", default=WarehouseSection())
    sources: SourcesSection = described("Input files and their column mappings.")
    markets: MarketsSection = described("What one market is.")
    products: ProductsSection = described("What one product is.")
    market_size: dict[Identifier, MarketSizeAssumption] = described(
        "Market-size assumptions, one table per name. Built side by side; the first one "
        "feeds the summary and the first-stage check. Leave every [market_size.<name>] out "
        "for a choice-only project: no market, share or instrument table is built.",
        default_factory=dict,
    )
    shares: SharesSection = described("Share computation.", default=SharesSection())
    instruments: InstrumentsSection = described("Price instruments.", default=InstrumentsSection())
    choices: ChoicesSection = described("The choice-data build.", default=ChoicesSection())
    demographic_draws: DemographicDrawsSection = described(
        "Demographic draws per market.", default=DemographicDrawsSection()
    )
    export: ExportSection = described("Build folders and formats.", default=ExportSection())
    schedule: ScheduleSection = described("The nightly schedule.", default=ScheduleSection())
    partitioning: PartitioningSection = described(
        "Partitioned builds on a Dask cluster.", default=PartitioningSection()
    )
    config_path: Path | None = Field(None, exclude=True)

    @model_validator(mode="before")
    @classmethod
    def _tables_left_out_as_empty(cls, data: Any) -> Any:
        # a table with folders that the file leaves out is validated as an empty one, so its
        # default folders are resolved against this file's folder like written ones (a default
        # instance was built at import, against the working directory of that moment)
        if isinstance(data, dict):
            missing = [name for name in TABLES_WITH_FOLDERS if name not in data]
            data = {**data, **dict.fromkeys(missing, {})} if missing else data
        return data

    @property
    def market_build_enabled(self) -> bool:
        """True when the market build runs: the config names a market-size assumption."""
        return bool(self.market_size)

    def resolved_dict(self) -> dict[str, Any]:
        """The config with every default filled in and paths absolute, JSON-ready."""
        return json.loads(self.model_dump_json())

    def config_hash(self) -> str:
        """sha256 of the resolved config in canonical JSON."""
        return _canonical_hash(self.resolved_dict())

    def build_hash(self) -> str:
        """sha256 of the settings that shape what a build computes: the resolved config without
        `RUN_SETTINGS` and the sources' file patterns. The incremental builds compare it, so a
        moved project folder (every resolved path moves with it), another memory limit or
        export root keeps the next night incremental. Which files are read is the ledger's
        business: a file that arrives, leaves or moves is judged there."""
        settings = self.resolved_dict()
        for section, *keys in RUN_SETTINGS:
            if keys:
                settings[section] = {k: v for k, v in settings[section].items() if k not in keys}
            else:
                del settings[section]
        for source in settings["sources"].values():
            if isinstance(source, dict):
                source.pop("files", None)
        return _canonical_hash(settings)


# Where and how a build runs, never what it computes (section, or section and its keys).
RUN_SETTINGS: tuple[tuple[str, ...], ...] = (
    ("project",),
    ("warehouse",),
    ("export",),
    ("schedule",),
    (
        "partitioning",
        "root",
        "cluster_address",
        "cluster_address_env",
        "local_workers",
        "partition_retries",
    ),
)


def _canonical_hash(settings: dict[str, Any]) -> str:
    canonical = json.dumps(settings, sort_keys=True, separators=(",", ":"))
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
    if not config.market_build_enabled and not config.choices.enabled:
        raise ConfigInvalid(
            [
                UserError(
                    f"{path}: nothing to build: no [market_size] assumption and "
                    "choices.enabled = false.",
                    "add a [market_size.<name>] table for the market build, or set "
                    "choices.enabled = true for choice data.",
                )
            ]
        )
    problems = draw_problems(config, path)
    if problems:
        raise ConfigInvalid(problems)
    if check_files:
        _check_files_exist(config, path)
    return config


def draw_problems(config: ProjectConfig, path: Path) -> list[UserError]:
    """What demographic_draws.draws needs and the config lacks: columns, households, markets."""
    if config.demographic_draws.draws is None:
        return []
    key = f"{path}: key 'demographic_draws.draws'"
    problems = []
    if not config.choices.demographics:
        problems.append(
            UserError(
                f"{key} needs demographic columns: choices.demographics is empty.",
                "list the households columns to draw in choices.demographics.",
            )
        )
    if config.sources.households is None:
        problems.append(
            UserError(
                f"{key} needs the households file: there is no [sources.households].",
                "configure [sources.households] or leave draws unset.",
            )
        )
    if not config.market_build_enabled:
        problems.append(
            UserError(
                f"{key} draws per market, but the config has no [market_size] assumption.",
                "add a [market_size.<name>] table or leave draws unset.",
            )
        )
    return problems


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
        return UserError(
            f"{path}: missing required key {key!r}.", _missing_key_hint(problem["loc"])
        )
    expected = _expected(kind, problem.get("ctx") or {})
    given = problem.get("input")
    if expected is None:
        message = problem["msg"].removeprefix("Value error, ")
        shown = f" (got {_shown(given)})" if isinstance(given, str | int | float) else ""
        return UserError(f"{path}: key {key!r}: {message}{shown}.", DOCS_HINT)
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
        return "write it as the rule says; " + DOCS_HINT
    return DOCS_HINT


def _unquoted_example(kind: type, given: Any) -> str | None:
    if kind is bool:
        return "true"
    try:
        return str(kind(given)) if isinstance(given, str) else None
    except ValueError:
        return None


def _allowed_keys_hint(location: tuple[Any, ...]) -> str:
    model = _model_at(location[:-1])
    if model is None:
        return f"remove it; {DOCS_HINT}"
    allowed = [
        f"{name} ({short_description(field)})" for name, field in documented_fields(model).items()
    ]
    return f"allowed here: {', '.join(allowed)}; {DOCS_HINT}"


def _missing_key_hint(location: tuple[Any, ...]) -> str:
    model = _model_at(location[:-1])
    field = documented_fields(model).get(str(location[-1])) if model is not None else None
    return f"{short_description(field)}; {DOCS_HINT}" if field is not None else DOCS_HINT


def _model_at(location: tuple[Any, ...]) -> Any:
    """The section model at a key path, skipping user-chosen names; None past a plain value."""
    model: Any = ProjectConfig
    parts = list(location)
    while parts:
        field = model.model_fields.get(str(parts.pop(0)))
        if field is None:
            return None
        if getattr(field.annotation, "__origin__", None) is dict and parts:
            parts.pop(0)  # a user-chosen name such as a market-size assumption
        model = _section_model(field.annotation)
        if model is None:
            return None
    return model


def config_models(model: Any = ProjectConfig) -> list[Any]:
    """Every section model reachable from `model`, itself first, each once, in key order."""
    found = [model]
    for field in model.model_fields.values():
        section = _section_model(field.annotation)
        if section is None:
            section = _section_model(_dict_value(field.annotation))
        for reached in config_models(section) if section is not None else []:
            if reached not in found:
                found.append(reached)
    return found


def documented_fields(model: Any) -> dict[str, FieldInfo]:
    """The keys a user writes in a section (internal fields such as config_path left out)."""
    return {name: field for name, field in model.model_fields.items() if not field.exclude}


def short_description(field: FieldInfo) -> str:
    """The first sentence of a field's description, without its full stop."""
    return str(field.description or "").split(". ", 1)[0].removesuffix(".")


def field_unit(field: FieldInfo) -> str:
    """The unit a field's value is written in ("" when it has none)."""
    extra = field.json_schema_extra
    return str(extra.get("unit", "")) if isinstance(extra, dict) else ""


def _dict_value(annotation: Any) -> Any:
    arguments = getattr(annotation, "__args__", ())
    return arguments[1] if getattr(annotation, "__origin__", None) is dict else None


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
