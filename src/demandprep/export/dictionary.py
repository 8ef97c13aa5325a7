"""The data dictionary: every exported column's meaning, unit and formula, from one source.

The source is the pandera models that guard the warehouse tables (`demandprep.schemas.*`):
a field's `description` and its `metadata={"unit": ..., "formula": ...}`. Columns whose names
depend on the config are documented by the schema modules' own helpers
(`schemas.instruments.describe_instrument_column`, `schemas.choices.config_column_notes`), then
by entries made here from the config (characteristics, demographics), then by regex fields or a
model's `Config.metadata["dynamic_columns"]`. A column nothing documents stops the export.
"""

from __future__ import annotations

import importlib
import json
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import asdict, dataclass, replace
from pathlib import Path
from typing import Any

import duckdb
import pandera.polars as pa

from demandprep.config import REFERENCE_REQUIRED, MarketSizeAssumption, ProjectConfig
from demandprep.errors import UserError
from demandprep.export.tables import table_columns

SCHEMA_MODULES = (
    "demandprep.schemas.ingest",
    "demandprep.schemas.market",
    "demandprep.schemas.instruments",
    "demandprep.schemas.choices",
    "demandprep.schemas.demographics",
    "demandprep.schemas.export",
)

# Output kind -> the warehouse tables whose models document its columns, first match wins.
KIND_TABLES: dict[str, tuple[str, ...]] = {
    "shares": ("shares", "market_products", "share_table", "instruments"),
    "markets": ("markets",),
    "products": ("products",),
    "geographies": ("geographies",),
    "demographics": ("demographic_draws",),
    "choices": ("choices",),
    "choosers": ("choosers",),
    "ledger": ("ledger",),
    "ledger_reasons": ("ledger_reasons",),
    "quarantine": ("quarantine_export", "quarantine"),
}

ModelMap = Mapping[str, Sequence[type[pa.DataFrameModel]]]
NoteMap = Mapping[str, Mapping[str, "ColumnEntry"]]
SHELF_STANDARD = (*REFERENCE_REQUIRED["shelf_prices"], "promo")


@dataclass(frozen=True)
class ColumnEntry:
    """One column's documentation and where it was defined."""

    column: str
    description: str
    unit: str
    formula: str
    defined_by: str

    def as_metadata(self) -> dict[str, str]:
        """The entry as Parquet field metadata."""
        return {"description": self.description, "unit": self.unit, "formula": self.formula}


def schema_models(
    modules: Iterable[str] = SCHEMA_MODULES,
) -> dict[str, list[type[pa.DataFrameModel]]]:
    """Every pandera model in the schema modules, keyed by the warehouse table it guards."""
    found: dict[str, list[type[pa.DataFrameModel]]] = {}
    for module_name in modules:
        try:
            module = importlib.import_module(module_name)
        except ModuleNotFoundError as error:
            if error.name != module_name:
                raise
            continue
        for value in vars(module).values():
            if _is_model(value) and value.__module__ == module.__name__:
                found.setdefault(model_table(value), []).append(value)
    return found


def model_table(model: type[pa.DataFrameModel]) -> str:
    """The table a model guards: its Config.name if set, else its class name in snake_case."""
    configured = model.__config__.name
    name = configured if configured and configured != model.__name__ else model.__name__
    snake = re.sub(r"(?<!^)(?=[A-Z])", "_", name).lower()
    return re.sub(r"_(schema|model)$", "", snake)


def step_notes(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig
) -> dict[str, dict[str, ColumnEntry]]:
    """Entries the steps' schema modules give for config-dependent columns, per output kind."""
    choice_notes = _choice_notes(config)
    return {"shares": _instrument_notes(con), "choices": choice_notes, "choosers": choice_notes}


def document_columns(
    kind: str,
    columns: Sequence[str],
    config: ProjectConfig,
    models: ModelMap,
    notes: NoteMap | None = None,
) -> dict[str, ColumnEntry]:
    """An entry for each of `columns` of an output of `kind`; raises if any is undocumented."""
    candidates = [model for table in KIND_TABLES[kind] for model in models.get(table, ())]
    kind_notes = (notes or {}).get(kind, {})
    entries: dict[str, ColumnEntry] = {}
    missing: list[str] = []
    for column in columns:
        entry = (
            _field_entry(column, candidates)
            or kind_notes.get(column)
            or _config_entry(column, kind, config)
            or _pattern_entry(column, candidates)
        )
        if entry is None:
            missing.append(column)
        else:
            entries[column] = entry
    if missing:
        raise UserError(
            f"the data dictionary has no entry for column(s) {', '.join(missing)} of the "
            f"{kind!r} output.",
            "document each column in its pandera model (Field description and metadata).",
        )
    return entries


def dictionary_document(
    files: Mapping[str, Sequence[tuple[ColumnEntry, str]]],
    tables: Mapping[str, Mapping[str, Any]] | None = None,
    config: ProjectConfig | None = None,
) -> dict:
    """The JSON dictionary: per file its columns (entry and stored type), grain and key; and,
    with the config, whether the market build ran and every market-size assumption's values."""
    document: dict[str, Any] = {
        "files": {
            name: [{**asdict(entry), "type": type_name} for entry, type_name in columns]
            for name, columns in files.items()
        }
    }
    if tables is not None:
        document["tables"] = {name: dict(table) for name, table in tables.items()}
    if config is not None:
        document["market_build"] = market_build_record(config)
        document["market_size"] = {
            name: assumption_values(assumption) for name, assumption in config.market_size.items()
        }
    return document


# kind -> what one row of its file is
GRAINS = {
    "shares": "one row per market and product",
    "markets": "one row per market",
    "products": "one row per product id (fringe included)",
    "geographies": "one row per geography",
    "demographics": "one row per market and draw",
    "choices": "one row per choice occasion and alternative",
    "choosers": "one row per chooser (pseudonymised loyalty card)",
    "ledger": "one row per input file version",
    "ledger_reasons": "one row per input file and quarantine reason",
    "quarantine": "one row per quarantined input line and reason",
}
# The parameters each market-size method reads.
METHOD_PARAMETERS = {
    "visits": ("units_per_visit",),
    "population": ("units_per_person_per_day", "population_column"),
    "peak_multiple": ("multiple",),
    "table": (),
}


def table_record(kind: str, key: Sequence[str], key_unique: bool) -> dict[str, Any]:
    """A file's grain and key for the dictionary (`key_unique`: no two rows share the key)."""
    return {"grain": GRAINS[kind], "key": list(key), "key_unique": key_unique}


def market_build_record(config: ProjectConfig) -> dict[str, Any]:
    """Whether the market build ran, and why not (for the manifest and the dictionary)."""
    if config.market_build_enabled:
        return {"enabled": True}
    return {
        "enabled": False,
        "reason": "no [market_size] assumption in the config: choice data only",
    }


def assumption_values(assumption: MarketSizeAssumption) -> dict[str, Any]:
    """The method of a market-size assumption and the values of the parameters it reads."""
    values = {name: getattr(assumption, name) for name in METHOD_PARAMETERS[assumption.method]}
    return {"method": assumption.method, **values}


def size_formula(assumption: MarketSizeAssumption) -> str:
    """The market size formula of one assumption with its configured values written in."""
    match assumption.method:
        case "visits":
            return f"M = visits x {assumption.units_per_visit} equivalent units per visit (visits)"
        case "population":
            return (
                f"M = sum of stores column {assumption.population_column!r} over the geography "
                f"x {assumption.units_per_person_per_day} x days in the period (population)"
            )
        case "peak_multiple":
            return (
                f"M = {assumption.multiple} x the geography's largest period volume (peak_multiple)"
            )
    return "M = the size sources.market_sizes gives the geography and period start (table)"


def with_size_formula(
    columns: Sequence[tuple[ColumnEntry, str]], assumption: MarketSizeAssumption
) -> list[tuple[ColumnEntry, str]]:
    """A file's dictionary columns with market_size's formula made concrete for its assumption."""
    formula = size_formula(assumption)
    return [
        (replace(entry, formula=formula) if entry.column == "market_size" else entry, type_name)
        for entry, type_name in columns
    ]


def write_dictionary(folder: Path, document: dict) -> list[Path]:
    """Write the dictionary as `data_dictionary.json` and a readable `data_dictionary.md`."""
    json_path = folder / "data_dictionary.json"
    json_path.write_text(json.dumps(document, indent=2, sort_keys=True) + "\n", encoding="utf-8")
    md_path = folder / "data_dictionary.md"
    md_path.write_text(dictionary_markdown(document), encoding="utf-8")
    return [json_path, md_path]


def dictionary_markdown(document: dict) -> str:
    """The dictionary as Markdown: one table per file."""
    lines = ["# Data dictionary", "", *_build_lines(document)]
    for name, columns in document["files"].items():
        lines += [f"## {name}", ""]
        table = document.get("tables", {}).get(name)
        if table is not None:
            key = ", ".join(table["key"])
            shown = f"Key: {key}." if table["key_unique"] else f"Sorted by: {key} (not a key)."
            lines += [f"Grain: {table['grain']}. {shown}", ""]
        lines += [
            "| column | type | meaning | unit | formula |",
            "|---|---|---|---|---|",
        ]
        for item in columns:
            cells = [
                item["column"],
                item["type"],
                item["description"],
                item["unit"],
                item["formula"],
            ]
            lines.append("| " + " | ".join(_md_cell(cell) for cell in cells) + " |")
        lines.append("")
    return "\n".join(lines)


def _build_lines(document: dict) -> list[str]:
    market = document.get("market_build")
    if market is None:
        return []
    if not market["enabled"]:
        return [f"market build: off ({market['reason']})", ""]
    lines = ["market build: on", "", "## Market-size assumptions", ""]
    for name, values in document.get("market_size", {}).items():
        shown = [f"method {values['method']}"]
        shown += [f"{key} = {value}" for key, value in values.items() if key != "method"]
        lines.append(f"- {name}: {', '.join(shown)}")
    return [*lines, ""]


def _field_entry(column: str, models: Sequence[type[pa.DataFrameModel]]) -> ColumnEntry | None:
    for model in models:
        field = model.to_schema().columns.get(column)
        if field is not None and not field.regex and field.description:
            return _entry(column, field.description, field.metadata, _model_label(model))
    return None


def _pattern_entry(column: str, models: Sequence[type[pa.DataFrameModel]]) -> ColumnEntry | None:
    for model in models:
        for pattern, field in model.to_schema().columns.items():
            if field.regex and field.description and re.fullmatch(pattern, column):
                return _entry(column, field.description, field.metadata, _model_label(model))
        for dynamic in (model.__config__.metadata or {}).get("dynamic_columns", ()):
            if re.fullmatch(dynamic["pattern"], column):
                text = dynamic["description"].format(column=column)
                return _entry(column, text, dynamic, _model_label(model))
    return None


def _config_entry(column: str, kind: str, config: ProjectConfig) -> ColumnEntry | None:
    """Entries for columns the user names in the config, which no model can list in advance."""
    if kind == "products" and column in config.products.keys:
        source = config.sources.catalogue.columns.get(column, column)
        return ColumnEntry(
            column,
            f"Product-key part {column!r}, read from the catalogue column {source!r}, as text.",
            "text",
            "the product id is the key parts joined with '|' (fringe: null)",
            "config products.keys",
        )
    if kind == "geographies":
        source = config.sources.stores.columns.get(column, column)
        return ColumnEntry(
            column,
            f"Stores column {column!r} (file column {source!r}), one value in each geography: "
            "a level above it such as region or chain.",
            "as in the stores file",
            "the value shared by every store of the geography",
            "stores columns constant within each geography",
        )
    if kind == "demographics" and column in config.choices.demographics:
        households = config.sources.households
        source = households.columns.get(column, column) if households else column
        return ColumnEntry(
            column,
            f"Household demographic {column!r} of the drawn household, read from the "
            f"households column {source!r}.",
            "as in the households file",
            "households value of a household drawn with probability proportional to its visits",
            "config choices.demographics",
        )
    if kind in ("shares", "choices", "products") and column in config.products.characteristics:
        source = config.sources.catalogue.columns.get(column, column)
        return ColumnEntry(
            column,
            f"Product characteristic {column!r}, read from the catalogue column {source!r}.",
            "as in the catalogue",
            "catalogue value of the product (constant across markets)",
            "config products.characteristics",
        )
    if kind in ("choices", "choosers") and column in config.choices.demographics:
        households = config.sources.households
        source = households.columns.get(column, column) if households else column
        return ColumnEntry(
            column,
            f"Household demographic {column!r} of the chooser, read from the households "
            f"column {source!r}.",
            "as in the households file",
            "households value for the chooser's loyalty card",
            "config choices.demographics",
        )
    return None


def _instrument_notes(con: duckdb.DuckDBPyConnection) -> dict[str, ColumnEntry]:
    try:
        from demandprep.schemas.instruments import describe_instrument_column
    except ImportError:
        return {}
    columns = [c for c in table_columns(con, "share_table") if c.startswith("iv_")]
    sources: dict[str, str | None] = {}
    if table_columns(con, "instrument_columns"):
        rows = con.execute("select column_name, source from instrument_columns").fetchall()
        sources = dict(rows)
    label = "schemas.instruments.describe_instrument_column"
    # Why the probe: the helper answers a generic text for names it does not know; such a
    # column counts as undocumented rather than slipping through.
    generic = describe_instrument_column("iv_\0unknown", None)["description"]
    notes = {}
    for column in columns:
        text = describe_instrument_column(column, sources.get(column))
        if text["description"] != generic:
            notes[column] = _entry(column, text["description"], text, label)
    return notes


def _choice_notes(config: ProjectConfig) -> dict[str, ColumnEntry]:
    try:
        from demandprep.schemas.choices import config_column_notes
    except ImportError:
        return {}
    shelf = config.sources.shelf_prices
    extra = [c for c in shelf.columns if c not in SHELF_STANDARD] if shelf is not None else []
    label = "schemas.choices.config_column_notes"
    return {
        name: _entry(name, note["description"], note.get("metadata"), label)
        for name, note in config_column_notes(config, extra).items()
    }


def _entry(column: str, description: str, metadata: Mapping | None, label: str) -> ColumnEntry:
    metadata = metadata or {}
    return ColumnEntry(
        column,
        description,
        str(metadata.get("unit", "")),
        str(metadata.get("formula", "")),
        label,
    )


def _model_label(model: type[pa.DataFrameModel]) -> str:
    return f"{model.__module__.removeprefix('demandprep.')}.{model.__name__}"


def _is_model(value: object) -> bool:
    return (
        isinstance(value, type)
        and issubclass(value, pa.DataFrameModel)
        and value is not pa.DataFrameModel
    )


def _md_cell(text: str) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")
