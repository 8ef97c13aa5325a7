"""The config's documents, generated from the models in config.py: docs/config.md and the starter.

Every key's description, unit, default and allowed values live once, on its pydantic field;
this module only lays them out. Regenerate the reference page with
`python -m demandprep.config_reference > docs/config.md`; `demandprep init` writes
`starter_toml()`, the models' comments around the example values of STARTER_VALUES.
"""

from __future__ import annotations

import json
import sys
import textwrap
import types
from dataclasses import dataclass
from datetime import date
from pathlib import Path
from typing import Any, Literal, Union, get_args, get_origin

from annotated_types import Ge, Gt, Le, Lt, MaxLen, MinLen
from pydantic import BaseModel
from pydantic.fields import FieldInfo

from demandprep.config import (
    IDENTIFIER_PATTERN,
    RECEIPT_COLUMNS,
    RECEIPT_REQUIRED,
    REFERENCE_REQUIRED,
    ChoicesSection,
    CostShifterInstrument,
    DemographicDrawsSection,
    EquivalentUnit,
    ExportSection,
    FileSource,
    HausmanInstrument,
    InstrumentsSection,
    MarketSizeAssumption,
    MarketsSection,
    PartitioningSection,
    ProductsSection,
    ProjectConfig,
    ProjectSection,
    ReceiptSource,
    ScheduleSection,
    SharesSection,
    SourcesSection,
    UniverseSection,
    WarehouseSection,
    documented_fields,
    field_unit,
)

REGENERATE = "python -m demandprep.config_reference > docs/config.md"
WIDTH = 99

# Every section of the reference page in file order: its TOML table name and its model.
REFERENCE_SECTIONS: list[tuple[str, Any]] = [
    ("", ProjectConfig),
    ("project", ProjectSection),
    ("warehouse", WarehouseSection),
    ("sources", SourcesSection),
    ("sources.<name>", FileSource),
    ("sources.receipts", ReceiptSource),
    ("markets", MarketsSection),
    ("products", ProductsSection),
    ("products.equivalent_unit", EquivalentUnit),
    ("products.universe", UniverseSection),
    ("market_size.<name>", MarketSizeAssumption),
    ("shares", SharesSection),
    ("instruments", InstrumentsSection),
    ("instruments.hausman", HausmanInstrument),
    ("instruments.cost_shifters", CostShifterInstrument),
    ("choices", ChoicesSection),
    ("demographic_draws", DemographicDrawsSection),
    ("export", ExportSection),
    ("schedule", ScheduleSection),
    ("partitioning", PartitioningSection),
]


# Sections whose starter tables show only the keys given in STARTER_VALUES: a source other than
# receipts (its reading keys are shown once, on receipts) and a market-size assumption (each
# method reads its own keys).
SPARSE_SECTIONS = (FileSource, MarketSizeAssumption)


@dataclass(frozen=True)
class Commented:
    """An example written commented out in the starter: an optional key or table."""

    value: Any


# The starter's example values, shaped like the file; keys left out get their default.
# An invented coffee study: a grocery chain's receipts, catalogue and stores.
STARTER_VALUES: dict[str, Any] = {
    "project": {"name": "my-category-study"},
    "sources": {
        "receipts": {
            "files": ["raw/receipts/*.csv.gz"],
            "timezone": Commented("Europe/Lisbon"),
            "valid_from": "2024-01-01",
            "valid_to": "2025-12-31",
            "columns": {
                "receipt": "receipt_id",
                "line": "line_no",
                "store": "store_id",
                "sold_at": "timestamp",
                "sku": "sku",
                "quantity": "quantity",
                "amount": "gross_amount",
                "card": "loyalty_card",
                "discount": "discount",
                "line_kind": "kind",
            },
        },
        "catalogue": {
            "files": ["raw/catalogue.csv"],
            "columns": {
                "sku": "sku",
                "category": "category",
                "brand": "brand",
                "firm": "owner",
                "format": "format",
                "pack_size": "pack_size",
                "pack_unit": "pack_unit",
                "roast_level": "roast_level",
            },
        },
        "stores": {
            "files": ["raw/stores.csv"],
            "columns": {"store": "store_id", "region": "region", "population": "catchment"},
        },
        "households": Commented(
            {
                "files": ["raw/households.csv"],
                "columns": {"card": "card", "household_size": "household_size"},
            }
        ),
        "shelf_prices": Commented(
            {
                "files": ["raw/shelf_prices.csv"],
                "columns": {
                    "store": "store_id",
                    "date": "week_start",
                    "sku": "sku",
                    "price": "price",
                    "promo": "promo_flag",
                },
            }
        ),
        "market_sizes": Commented(
            {
                "files": ["raw/market_sizes.csv"],
                "columns": {"geography": "store_id", "period": "week_start", "size": "size"},
            }
        ),
        "cost_shifters": Commented(
            {
                "files": ["raw/cost_shifters.csv"],
                "columns": {"period": "week_start", "green_coffee_index": "index"},
            }
        ),
    },
    "markets": {"categories": ["coffee"]},
    "products": {
        "keys": ["brand", "format", "pack_size"],
        "nest": "format",
        "characteristics": ["roast_level"],
        "universe": {"top_n": 20, "min_volume_share": 0.01, "min_market_presence": 0.5},
    },
    "market_size": {
        "visits": {"method": "visits", "units_per_visit": 0.5},
        "population": {
            "method": "population",
            "units_per_person_per_day": 0.02,
            "population_column": "population",
        },
        "peak": {"method": "peak_multiple", "multiple": 2.0},
        "agreed": Commented({"method": "table"}),
    },
    "instruments": {
        "hausman": {"exclude_same": Commented("region")},
        "characteristic_sums": ["roast_level"],
        "differentiation": ["roast_level"],
        "cost_shifters": Commented({"columns": ["green_coffee_index"]}),
    },
    "choices": {
        "enabled": False,
        "sampled_alternatives": Commented(10),
        "demographics": Commented(["household_size"]),
    },
    "demographic_draws": {"draws": Commented(200)},
    "partitioning": {
        "by": Commented("region"),
        "cluster_address": Commented("tcp://10.0.0.5:8786"),
        "chooser_buckets": Commented(8),
    },
}
STARTER_HEAD = """\
# demandprep starter config. Edit the paths and column mappings for your data, then run
#   demandprep check demandprep.toml
# Relative paths resolve against this file's folder. Unknown keys are errors. Every key is
# described in docs/config.md; the comments here are the same text.
"""


# ---- docs/config.md ----------------------------------------------------------------------


def reference_markdown() -> str:
    """The text of docs/config.md: every section and key with type, default, unit and rule."""
    parts = [
        "# Config reference\n",
        "Generated from the models in `src/demandprep/config.py`; do not edit by hand. "
        f"Regenerate with `{REGENERATE}`.\n",
        "One TOML file per project. Unknown keys are errors, and so are values of the wrong "
        "type (no quoted numbers; an integer is accepted where a number belongs, and paths and "
        "dates are read from text). Relative paths resolve against the config file's folder. "
        "`demandprep init` writes a starter config with these descriptions as comments.\n",
    ]
    parts += [_section_markdown(title, model) for title, model in REFERENCE_SECTIONS]
    return "\n".join(parts)


def reference_heading(title: str) -> str:
    """The heading line of a section of docs/config.md."""
    return f"## `[{title}]`" if title else "## Top-level tables"


def section_fields(model: Any) -> dict[str, FieldInfo]:
    """The keys a section documents itself: those its documented base section lacks."""
    fields = documented_fields(model)
    for _, other in REFERENCE_SECTIONS:
        if other is not model and issubclass(model, other):
            fields = {n: f for n, f in fields.items() if n not in other.model_fields}
    return fields


def _section_markdown(title: str, model: Any) -> str:
    lines = [reference_heading(title), "", _one_line(model.__doc__ or ""), ""]
    lines += _section_notes(title)
    lines += [
        "| key | type | default | unit | allowed | description |",
        "|---|---|---|---|---|---|",
    ]
    for name, field in section_fields(model).items():
        cells = [
            f"`{name}`",
            _type_name(field.annotation),
            _default_text(field),
            field_unit(field),
            _allowed_text(field),
            str(field.description),
        ]
        lines.append("| " + " | ".join(cell.replace("|", "\\|") for cell in cells) + " |")
    return "\n".join(lines) + "\n"


def _section_notes(title: str) -> list[str]:
    if title == "sources":
        rows = [f"- `{name}`: {', '.join(cols)}" for name, cols in REFERENCE_REQUIRED.items()]
        return ["Columns each reference source must map (`columns` keys):", "", *rows, ""]
    if title == "sources.<name>":
        return ["Any source (`receipts`, `catalogue`, `stores`, ...) takes these keys.", ""]
    if title == "sources.receipts":
        rows = [
            f"- `{name}` ({'required' if name in RECEIPT_REQUIRED else 'optional'}): {text}"
            for name, text in RECEIPT_COLUMNS.items()
        ]
        intro = "Takes every key of `[sources.<name>]`, and the keys below. Its `columns`:"
        return [intro, "", *rows, ""]
    if title == "market_size.<name>":
        return ["The name is yours (`[market_size.visits]`, ...); it names the output files.", ""]
    return []


def _one_line(text: str) -> str:
    return " ".join(text.split())


def _type_name(annotation: Any) -> str:
    origin, arguments = get_origin(annotation), get_args(annotation)
    if origin in (Union, types.UnionType):
        return _type_name(next(a for a in arguments if a is not type(None)))
    if origin is Literal:
        return "text"
    if origin is list:
        return f"list of {_type_name(arguments[0])}"
    if origin is dict:
        value = arguments[1]
        if _model_of(value) is not None:
            return "a table per name"
        return "table" if value is Any else f"table of {_type_name(value)}"
    if get_args(annotation) and hasattr(annotation, "__metadata__"):
        return _type_name(arguments[0])
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return "table"
    names = {str: "text", int: "integer", float: "number", bool: "true/false"}
    names.update({date: "date", Path: "path"})
    return names.get(annotation, str(annotation))


def _default_text(field: FieldInfo) -> str:
    if field.is_required():
        return "required"
    value = field.get_default(call_default_factory=True)
    if value is None:
        return "unset"
    if isinstance(value, BaseModel):
        return "see its table"
    return f"`{toml_value(value)}`"


def _allowed_text(field: FieldInfo) -> str:
    rules = [_bound_text(item) for item in field.metadata]
    values = _literal_values(field.annotation)
    if values:
        rules.append(", ".join(f"`{value}`" for value in values))
    if _mentions_identifier(field):
        rules.append("letters, digits and _, not starting with a digit")
    elif "GB" in str(field.metadata):
        rules.append('a size such as `"4GB"`')
    return "; ".join(rule for rule in rules if rule)


def _bound_text(item: Any) -> str:
    bounds = {Ge: (">=", "ge"), Gt: (">", "gt"), Le: ("<=", "le"), Lt: ("<", "lt")}
    for kind, (sign, attribute) in bounds.items():
        if isinstance(item, kind):
            return f"{sign} {getattr(item, attribute)}"
    if isinstance(item, MinLen):
        return f"at least {item.min_length}"
    if isinstance(item, MaxLen):
        return f"at most {item.max_length}"
    return ""


def _literal_values(annotation: Any) -> list[Any]:
    if get_origin(annotation) is Literal:
        return list(get_args(annotation))
    for argument in get_args(annotation):
        if get_origin(argument) is Literal:
            return list(get_args(argument))
    return []


def _mentions_identifier(field: FieldInfo) -> bool:
    return IDENTIFIER_PATTERN in repr(field.metadata) + repr(field.annotation)


def toml_value(value: Any) -> str:
    """A value as TOML writes it (strings in double quotes, lists in brackets)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str | Path | date):
        return json.dumps(str(value))
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(item) for item in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k} = {toml_value(v)}" for k, v in value.items()) + "}"
    return repr(value)


# ---- the starter config --------------------------------------------------------------------


def starter_toml() -> str:
    """The starter config `demandprep init` writes: example values, each key's description."""
    lines = STARTER_HEAD.splitlines()
    for name, field in documented_fields(ProjectConfig).items():
        lines += _table_lines(name, field, STARTER_VALUES.get(name, {}))
    return "\n".join(lines) + "\n"


def _table_lines(path: str, field: FieldInfo, values: Any) -> list[str]:
    """One table (or, for a table of named tables, each of them) with its comment above."""
    commented = isinstance(values, Commented)
    values = values.value if commented else values
    lines = ["", *_comment(str(field.description))]
    if get_origin(field.annotation) is dict:  # a table of named tables (market_size)
        model = _model_of(get_args(field.annotation)[1])
        for number, (name, named) in enumerate(values.items()):
            block = _table_lines(f"{path}.{name}", _named_field(model), named)
            lines += block[1:] if number == 0 else block
        return lines
    body = _keys_lines(path, _model_of(field.annotation), values)
    block = [f"[{path}]", *body] if body and body[0] else body  # no header over sub-tables alone
    return lines + ([_commented(line) for line in block] if commented else block)


def _commented(line: str) -> str:
    return line if line.startswith("#") or not line else f"# {line}"


def _keys_lines(path: str, model: Any, values: dict[str, Any]) -> list[str]:
    """A table's plain keys, then its sub-tables (TOML wants them in that order)."""
    lines: list[str] = []
    tables: list[str] = []
    for name, field in documented_fields(model).items():
        if model in SPARSE_SECTIONS and name not in values:
            continue
        value = values[name] if name in values else _starter_default(f"{path}.{name}", field)
        if _model_of(field.annotation) is not None:
            tables += _table_lines(f"{path}.{name}", field, value)
        elif isinstance(value, dict) and value:
            tables += ["", *_comment(str(field.description)), f"[{path}.{name}]"]
            tables += _column_lines(path, value)
        else:
            lines += _key_lines(name, field, value)
    return lines + tables


def _key_lines(name: str, field: FieldInfo, value: Any) -> list[str]:
    commented = isinstance(value, Commented)
    shown = value.value if commented else value
    text = f"{name} = {toml_value(shown)}"
    comment = [*_comment(str(field.description)), *_comment(_key_facts(field))]
    return [*comment, f"# {text}" if commented else text]


def _column_lines(path: str, columns: dict[str, str]) -> list[str]:
    source = path.rsplit(".", 1)[-1]
    lines = []
    for ours, theirs in columns.items():
        if source == "receipts":
            kind = "required" if ours in RECEIPT_REQUIRED else "optional"
            note = f"{kind}: {RECEIPT_COLUMNS[ours]}"
        else:
            note = "required" if ours in REFERENCE_REQUIRED.get(source, ()) else ""
        line = f"{ours} = {toml_value(theirs)}"
        lines.append(f"{line:<36}  # {note}" if note else line)
    return lines


def _key_facts(field: FieldInfo) -> str:
    """Unit, allowed values and default of a key, as one sentence each."""
    facts = []
    if field_unit(field):
        facts.append(f"Unit: {field_unit(field)}.")
    values = _literal_values(field.annotation)
    if values:
        facts.append(f"One of: {', '.join(toml_value(value) for value in values)}.")
    default = _default_text(field).strip("`")
    facts.append("Required." if field.is_required() else f"Default: {default}.")
    return " ".join(facts)


def _comment(text: str) -> list[str]:
    return textwrap.wrap(
        text, WIDTH, initial_indent="# ", subsequent_indent="# ", break_on_hyphens=False
    )


def _starter_default(key: str, field: FieldInfo) -> Any:
    if field.is_required():
        raise ValueError(f"STARTER_VALUES lacks a value for the required key {key}")
    return field.get_default(call_default_factory=True)


def _model_of(annotation: Any) -> Any:
    candidates = [annotation, *get_args(annotation)]
    for candidate in candidates:
        if isinstance(candidate, type) and issubclass(candidate, BaseModel):
            return candidate
    return None


def _named_field(model: Any) -> FieldInfo:
    return FieldInfo(annotation=model, description="")


def main() -> None:
    """Print docs/config.md."""
    sys.stdout.write(reference_markdown())


if __name__ == "__main__":
    main()
