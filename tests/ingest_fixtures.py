"""Shared helpers of the ingest tests: a copy of the fault fixture and an independent classifier.

The classifier re-reads a receipts file with Python's csv module and applies the documented
rules in their documented order, line by line, with nothing from demandprep: the tests compare
the warehouse's quarantine and ledger with it.
"""

from __future__ import annotations

import csv
import re
import shutil
from collections import Counter
from dataclasses import dataclass
from datetime import date, datetime
from pathlib import Path

from demandprep.config import ProjectConfig, load_config
from demandprep.ingest.runner import ingest_all
from demandprep.warehouse import open_warehouse

REPO = Path(__file__).resolve().parents[1]
FAULTS = REPO / "data_samples" / "faults"

# the fault fixture's dialect and rules (see data_samples/faults/demandprep.toml)
HEADER = ["ticket", "row", "branch", "stamp", "article", "qty", "value", "member", "disc", "kind"]
REQUIRED = ["ticket", "branch", "stamp", "article", "qty", "value"]
VALID_FROM, VALID_TO = date(2024, 1, 1), date(2024, 12, 31)
STAMP_FORMAT = "%Y-%m-%d %H:%M:%S"
MAX_QUANTITY, MAX_AMOUNT = 10_000, 1_000_000  # the documented defaults of max_quantity/max_amount


def copy_faults(tmp_path: Path) -> Path:
    """A private copy of the fault fixture folder; returns its config path."""
    target = tmp_path / "faults"
    shutil.copytree(FAULTS, target, ignore=shutil.ignore_patterns("warehouse"))
    return target / "demandprep.toml"


def drop_catalogue_line(catalogue: Path, sku: str) -> None:
    """Rewrite a catalogue CSV without the row of `sku` (its first field)."""
    lines = catalogue.read_text(encoding="utf-8").splitlines(keepends=True)
    kept = [line for line in lines if not line.startswith(f"{sku},")]
    catalogue.write_text("".join(kept), encoding="utf-8")


def ingest(config_path: Path):
    """Ingest every source of the config at `config_path`; returns (config, summary)."""
    config = load_config(config_path)
    with open_warehouse(config.warehouse) as con:
        summary = ingest_all(con, config)
    return config, summary


def query(config: ProjectConfig, sql: str, params=None) -> list:
    """The rows of one query on the config's warehouse."""
    with open_warehouse(config.warehouse) as con:
        return con.execute(sql, params).fetchall()


def faults_config(tmp_path: Path) -> ProjectConfig:
    """The loaded config of a private copy of the fault fixture."""
    return load_config(copy_faults(tmp_path))


def reference_keys(folder: Path) -> tuple[set[str], set[str]]:
    """Store ids and SKUs of the fixture's reference files, read with the csv module."""
    with (folder / "stores.csv").open(newline="", encoding="utf-8") as handle:
        stores = {row["branch"] for row in csv.DictReader(handle, delimiter=";")}
    with (folder / "catalogue.csv").open(newline="", encoding="utf-8") as handle:
        skus = {row["article"] for row in csv.DictReader(handle, delimiter=";")}
    return stores, skus


@dataclass
class Expected:
    """What the independent classifier found in one file."""

    reasons: dict[int, str]  # physical line number -> reason, for refused lines
    text: dict[int, str]  # physical line number -> the line as written (decodable lines)
    accepted: int

    @property
    def rows_read(self) -> int:
        """Data lines of the file (header excluded)."""
        return self.accepted + len(self.reasons)

    def counts(self) -> Counter[str]:
        """Refused lines by reason."""
        return Counter(self.reasons.values())


def number(text: str) -> float:
    """A decimal-comma number: digits, an optional exponent, no thousands marks ('.', '_', ' ')."""
    # Python's float() alone would take '1_000' and 'inf'
    if not re.fullmatch(r"[+-]?([0-9]+(,[0-9]*)?|,[0-9]+)([eE][+-]?[0-9]+)?", text):
        raise ValueError(text)
    return float(text.replace(",", "."))


def classify_file(path: Path, stores: set[str], skus: set[str], seen: set[tuple]) -> Expected:
    """Apply the rules to each data line of `path` in order; `seen` holds accepted line keys."""
    reasons: dict[int, str] = {}
    texts: dict[int, str] = {}
    accepted = 0
    raw_lines = path.read_bytes().split(b"\n")
    for number_, raw in enumerate(raw_lines[1:], start=2):
        if not raw:
            continue
        try:
            text = raw.decode("utf-8")
        except UnicodeDecodeError:
            reasons[number_] = "unparseable_field"
            continue
        texts[number_] = text
        fields = next(csv.reader([text], delimiter=";"))
        reason = classify_fields(fields, stores, skus, seen)
        if reason is None:
            accepted += 1
        else:
            reasons[number_] = reason
    return Expected(reasons, texts, accepted)


def classify_fields(
    fields: list[str], stores: set[str], skus: set[str], seen: set[tuple]
) -> str | None:
    """The first rule one line breaks, or None when it is accepted (then its key is seen)."""
    if len(fields) != len(HEADER):
        return "wrong_column_count"
    row = {name: value.strip() for name, value in zip(HEADER, fields, strict=True)}
    if any(not row[name] for name in REQUIRED):
        return "missing_required_field"
    try:
        quantity, amount = number(row["qty"]), number(row["value"])
        number(row["disc"]) if row["disc"] else 0.0
        sold_at = datetime.strptime(row["stamp"], STAMP_FORMAT)
        line = int(row["row"]) if row["row"] else None
    except ValueError:
        return "unparseable_field"
    discount = number(row["disc"]) if row["disc"] else 0.0
    if abs(quantity) > MAX_QUANTITY or max(abs(amount), abs(discount)) > MAX_AMOUNT:
        return "value_out_of_range"
    kind = row["kind"].lower() or "sale"
    if kind not in ("sale", "return", "void"):
        return "unknown_line_kind"
    if not VALID_FROM <= sold_at.date() <= VALID_TO:
        return "timestamp_out_of_range"
    if kind == "sale" and quantity <= 0:
        return "non_positive_quantity"
    if kind == "sale" and amount < 0:
        return "negative_amount"
    if kind == "return" and (quantity >= 0 or amount > 0):
        return "return_not_negative"
    if row["branch"] not in stores:
        return "unknown_store"
    if row["article"] not in skus:
        return "unknown_sku"
    key = (row["branch"], sold_at.date(), row["ticket"], line)
    if key in seen:
        return "duplicate_line"
    seen.add(key)
    return None


def classify_receipts(folder: Path) -> dict[str, Expected]:
    """Every receipts file of the fixture folder, in name order, classified independently."""
    stores, skus = reference_keys(folder)
    seen: set[tuple] = set()
    files = sorted((folder / "receipts").glob("receipts_*.csv"))
    return {str(path): classify_file(path, stores, skus, seen) for path in files}
