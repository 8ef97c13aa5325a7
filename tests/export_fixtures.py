"""Small warehouse tables with the contract's columns, a config and a BuildContext for export tests.

The invented scenario: four stores of an invented coffee chain, six weeks, six packaged coffees
plus the fringe, a few hundred shopping occasions. Prices are endogenous (they move with the
unobserved quality xi) and a Hausman-style instrument (the product's price in the other stores)
is provided, so the quick logit has something to find.
"""

from __future__ import annotations

import hashlib
import shutil
from datetime import UTC, date, datetime, timedelta
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import pandas as pd

from demandprep.choices.report_counts import count_choice_days
from demandprep.config import ProjectConfig
from demandprep.context import BuildContext

STORES = ("S01", "S02", "S03", "S04")
WEEKS = 6
FIRST_WEEK = date(2024, 3, 4)
# roaster, format, pack_grams, firm, roast_level, organic
PRODUCTS = (
    ("Hilltop", "beans", 250, "Hilltop Roasting", "dark", False),
    ("Hilltop", "ground", 500, "Hilltop Roasting", "medium", False),
    ("Larkspur", "beans", 250, "Larkspur & Daughters", "light", True),
    ("Larkspur", "ground", 250, "Larkspur & Daughters", "medium", True),
    ("Marrowby", "pods", 100, "Marrowby Coffee Works", "dark", False),
    ("Marrowby", "beans", 1000, "Marrowby Coffee Works", "medium", False),
)
ALPHA = 1.5  # true price sensitivity of the fixture's logit demand
RAW_CARD = "CARD-000123"  # a raw card id inside a quarantined receipt line


def export_config(
    base_dir: Path, export: dict[str, Any] | None = None, choices: bool = True
) -> ProjectConfig:
    """A config for the fixture world (no files are read; the warehouse is filled directly)."""
    raw = {
        "warehouse": {"path": str(base_dir / "wh.duckdb"), "temp_directory": str(base_dir / "tmp")},
        "sources": {
            "receipts": {
                "files": ["receipts/*.csv"],
                "columns": {
                    "receipt": "ticket_no",
                    "store": "shop_id",
                    "sold_at": "scanned_at",
                    "sku": "item_code",
                    "quantity": "qty",
                    "amount": "line_value",
                    "card": "loyalty_card",
                },
            },
            "catalogue": {
                "files": ["catalogue.csv"],
                "columns": {"sku": "item_code", "category": "category", "roast_level": "roast"},
            },
            "stores": {"files": ["stores.csv"], "columns": {"store": "shop_id"}},
            "households": {
                "files": ["households.csv"],
                "columns": {"card": "loyalty_card", "household_size": "hh_size"},
            },
        },
        "markets": {"categories": ["coffee"]},
        "products": {
            "keys": ["roaster", "format", "pack_grams"],
            "nest": "format",
            "characteristics": ["roast_level", "organic", "pack_grams"],
        },
        "market_size": {
            "visits": {"method": "visits", "units_per_visit": 1.0},
            "peak": {"method": "peak_multiple", "multiple": 3.0},
        },
        "choices": {"enabled": choices, "demographics": ["household_size"]},
        "export": {"root": str(base_dir / "builds"), **(export or {})},
    }
    return ProjectConfig.model_validate(raw, context={"base_dir": base_dir})


def fill_warehouse(con: duckdb.DuckDBPyConnection, occasions: int = 300, seed: int = 7) -> None:
    """Create every table the export reads, with deterministic invented rows."""
    rng = np.random.default_rng(seed)
    shares = _share_table(_market_products(rng))
    _create(con, "share_table", shares)
    _create(con, "markets", _markets(shares))
    _create(con, "instrument_columns", INSTRUMENT_COLUMNS)
    choices = _choices(rng, occasions)
    _create(con, "choices", choices)
    count_choice_days(con, None)  # the report's counts, kept with `choices` by the choice build
    _create(con, "choosers", _choosers(choices))
    ledger, reasons, quarantine = _ledger()
    _create(con, "ledger", ledger)
    _create(con, "ledger_reasons", reasons)
    _create(con, "quarantine", quarantine)


class FilledWarehouses:
    """`fill_warehouse` files by (occasions, seed), each filled once; tests get copies of them."""

    def __init__(self, root: Path) -> None:
        self.root = root
        self._files: dict[tuple[int, int], Path] = {}

    def copy(self, target: Path, occasions: int = 300, seed: int = 7) -> Path:
        """Put a filled warehouse file at `target` (a copy: the test may change it)."""
        key = (occasions, seed)
        if key not in self._files:
            path = self.root / f"filled-{occasions}-{seed}.duckdb"
            con = duckdb.connect(str(path))
            try:
                fill_warehouse(con, occasions=occasions, seed=seed)
            finally:
                con.close()
            self._files[key] = path
        target.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(self._files[key], target)
        return target


def fixture_context(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> BuildContext:
    """A BuildContext as the build stages would leave it: facts, warnings and timings."""
    ctx = BuildContext(con=con, config=config)
    ctx.facts["first_stage"] = {
        "partial_f": 42.5,
        "df_num": 1,
        "df_den": 130,
        "instruments": ["iv_hausman_price"],
        "weak": False,
    }
    ctx.facts["choices"] = {"chosen_added_to_set": 3, "multi_purchase_visits": {"largest_spend": 5}}
    ctx.warn("outside share below the floor 0.05 in 2 markets (assumption 'peak')")
    ctx.warn("3 chosen products were added to their occasion's choice set")
    ctx.timings.update({"market.shares": 0.12, "instruments.hausman": 0.05})
    return ctx


def product_id(product: tuple) -> str:
    """The product id: catalogue key values joined with '|'."""
    return f"{product[0]}|{product[1]}|{product[2]}"


def _create(con: duckdb.DuckDBPyConnection, name: str, frame: pd.DataFrame) -> None:
    con.register("incoming_frame", frame)
    con.execute(f"create or replace table {name} as select * from incoming_frame")  # noqa: S608
    con.unregister("incoming_frame")


def _market_products(rng: np.random.Generator) -> list[dict[str, Any]]:
    xi = rng.normal(0, 0.3, size=(len(STORES), WEEKS, len(PRODUCTS)))
    cost = rng.normal(0, 0.25, size=(WEEKS, len(PRODUCTS)))
    rows = []
    for s, store in enumerate(STORES):
        for w in range(WEEKS):
            period = FIRST_WEEK + timedelta(weeks=w)
            for j, product in enumerate(PRODUCTS):
                price = 3.0 + product[2] / 400 + cost[w, j] + 0.8 * xi[s, w, j]
                rows.append(
                    {
                        "store": store,
                        "period": period,
                        "j": j,
                        "product": product,
                        "price": round(price, 4),
                        "xi": xi[s, w, j],
                    }
                )
    return rows


# assumption -> how much smaller its market size is than the visits-based one
SIZE_FACTORS = {"visits": 1.0, "peak": 1.3}
VISITS_SIZE = 1_000.0


def _share_table(rows: list[dict[str, Any]]) -> pd.DataFrame:
    records = []
    for assumption, factor in SIZE_FACTORS.items():
        size = VISITS_SIZE / factor
        for market_key, group in _by_market(rows).items():
            store, period = market_key
            delta = np.array(
                [1.0 + 0.3 * (r["product"][5]) - ALPHA * r["price"] + r["xi"] for r in group]
            )
            expd = np.exp(delta)
            # Berry (1994) logit shares under the visits size; a smaller size scales them up.
            share = factor * expd / (1.0 + expd.sum() + 0.4)
            fringe_share = factor * 0.4 / (1.0 + expd.sum() + 0.4)
            outside = 1.0 - share.sum() - fringe_share
            assert outside > 0, "fixture market sizes must leave a positive outside share"
            for r, s in zip(group, share, strict=True):
                records.append(_share_row(assumption, store, period, r, s, outside, size))
            records.append(_fringe_row(assumption, store, period, fringe_share, outside, size))
    frame = pd.DataFrame(records)
    frame["iv_hausman_price"] = _hausman(frame)
    frame["iv_hausman_missing"] = frame["iv_hausman_price"].isna()
    # Sum of `organic` over rival firms' products in the market; none for the fringe.
    organic = frame["organic"].astype(float)
    market_total = organic.groupby([frame["assumption"], frame["market"]]).transform("sum")
    firm_total = organic.groupby([frame["assumption"], frame["market"], frame["firm"]]).transform(
        "sum"
    )
    frame["iv_rival_sum_organic"] = (market_total - firm_total).where(~frame["is_fringe"])
    return frame


INSTRUMENT_COLUMNS = pd.DataFrame(
    [
        {
            "column_name": "iv_hausman_missing",
            "role": "flag",
            "family": "hausman",
            "source": "price",
        },
        {
            "column_name": "iv_hausman_price",
            "role": "instrument",
            "family": "hausman",
            "source": "price",
        },
        {
            "column_name": "iv_rival_sum_organic",
            "role": "instrument",
            "family": "characteristic_sums",
            "source": "organic",
        },
    ]
)


def _by_market(rows: list[dict[str, Any]]) -> dict[tuple, list[dict[str, Any]]]:
    grouped: dict[tuple, list[dict[str, Any]]] = {}
    for row in rows:
        grouped.setdefault((row["store"], row["period"]), []).append(row)
    return grouped


def _share_row(assumption, store, period, r, share, outside, size) -> dict[str, Any]:
    product = r["product"]
    units = share * size
    return {
        "assumption": assumption,
        "market": f"{store}/{period:%Y-%m-%d}",
        "geography": store,
        "period_start": period,
        "product": product_id(product),
        "firm": product[3],
        "nest": product[1],
        "roast_level": product[4],
        "organic": product[5],
        "pack_grams": float(product[2]),
        "units": units,
        "equivalent_quantity": units,
        "net_revenue": units * r["price"],
        "price": r["price"],
        "gross_price": r["price"] * 1.05,
        "promo_share": 0.0,
        "share": share,
        "outside_share": outside,
        "log_share_ratio": float(np.log(share) - np.log(outside)),
        "within_nest_share": 0.5,
        "log_within_nest_share": float(np.log(0.5)),
        "market_size": size,
        "is_fringe": False,
        "is_zero_share": False,
    }


def _fringe_row(assumption, store, period, share, outside, size) -> dict[str, Any]:
    return {
        "assumption": assumption,
        "market": f"{store}/{period:%Y-%m-%d}",
        "geography": store,
        "period_start": period,
        "product": "fringe",
        "firm": "fringe",
        "nest": None,
        "roast_level": None,
        "organic": None,
        "pack_grams": None,
        "units": share * size,
        "equivalent_quantity": share * size,
        "net_revenue": share * size * 4.0,
        "price": 4.0,
        "gross_price": 4.2,
        "promo_share": 0.0,
        "share": share,
        "outside_share": outside,
        "log_share_ratio": float(np.log(share) - np.log(outside)),
        "within_nest_share": None,
        "log_within_nest_share": None,
        "market_size": size,
        "is_fringe": True,
        "is_zero_share": False,
    }


def _hausman(frame: pd.DataFrame) -> pd.Series:
    """Mean price of the same product in the same week at the other stores."""
    keys = ["assumption", "period_start", "product"]
    total = frame.groupby(keys)["price"].transform("sum")
    count = frame.groupby(keys)["price"].transform("count")
    others = (total - frame["price"]) / (count - 1)
    return others.where(~frame["is_fringe"])


def _markets(shares: pd.DataFrame) -> pd.DataFrame:
    """One row per assumption and market, consistent with the share table."""
    grouped = shares.groupby(["assumption", "market"], sort=True)
    frame = grouped.agg(
        geography=("geography", "first"),
        period_start=("period_start", "first"),
        market_size=("market_size", "first"),
        inside_quantity=("units", "sum"),
        outside_share=("outside_share", "first"),
        product_count=("product", "count"),
    ).reset_index()
    frame["visits"] = 900
    return frame


def _choices(rng: np.random.Generator, occasions: int) -> pd.DataFrame:
    """Occasions of 40 choosers: the six products plus 'none', one chosen row each."""
    records = []
    alternatives = [*PRODUCTS, None]
    for occasion in range(occasions):
        pick = int(rng.integers(len(alternatives)))
        store = STORES[occasion % len(STORES)]
        purchases = occasion // 40
        for j, product in enumerate(alternatives):
            records.append(_choice_row(rng, occasion, store, j, product, j == pick, purchases))
    frame = pd.DataFrame(records)
    frame["days_since_last_purchase"] = frame["days_since_last_purchase"].astype("Int64")
    return frame


def _choice_row(rng, occasion, store, j, product, chosen, purchases) -> dict[str, Any]:
    inside = product is not None
    bought = chosen and inside
    burn_in = occasion < 40
    occasion_at = datetime(2024, 3, 4, 9) + timedelta(hours=7 * occasion)
    week = occasion_at.date() - timedelta(days=occasion_at.weekday())
    in_markets = week < FIRST_WEEK + timedelta(weeks=WEEKS)
    return {
        "occasion": f"{store}/T{occasion:06d}",
        "chooser": _pseudonym(occasion % 40),
        "store": store,
        "market": f"{store}/{week.isoformat()}" if in_markets else None,
        "occasion_at": occasion_at,
        "alternative": product_id(product) if inside else "none",
        "chosen": chosen,
        "added_to_set": False,
        "choice_set_size": len(PRODUCTS) + 1,
        "sampled": False,
        "price": round(3.0 + product[2] / 400 + 0.1 * float(rng.normal()), 4) if inside else None,
        "price_source": "shelf" if inside else "outside",
        "promo": bool(j == 2 and occasion % 5 == 0) if inside else None,
        "firm": product[3] if inside else None,
        "nest": product[1] if inside else None,
        "quantity": 1.0 if bought else None,
        "spend": 4.5 if bought else None,
        "previous_choice": inside and occasion % 7 == j,
        "loyalty": None if burn_in else 1 / 6,
        "burn_in": burn_in,
        "days_since_last_purchase": occasion % 9 if purchases else None,
        "purchase_count": purchases,
        "holdout": occasion % 40 < 8,
        "household_known": True,
        "roast_level": product[4] if inside else None,
        "organic": product[5] if inside else None,
        "pack_grams": float(product[2]) if inside else None,
        "household_size": 1 + occasion % 40 % 4,
    }


def _pseudonym(index: int) -> str:
    """A stand-in for the keyed hash of a card: 32 hex digits."""
    return hashlib.sha256(f"fixture-chooser-{index}".encode()).hexdigest()[:32]


def _choosers(choices: pd.DataFrame) -> pd.DataFrame:
    chosen = choices[choices["chosen"]]
    frame = chosen.groupby("chooser").agg(
        holdout=("holdout", "first"),
        household_known=("household_known", "first"),
        occasions=("occasion", "nunique"),
        purchase_occasions=("alternative", lambda a: int((a != "none").sum())),
        first_occasion_at=("occasion_at", "min"),
        last_occasion_at=("occasion_at", "max"),
        household_size=("household_size", "first"),
    )
    return frame.reset_index()


def _ledger() -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    files = [
        ("F0000001", "receipts", "receipts/receipts_2024-03-04.csv", 1200, 4),
        ("F0000002", "receipts", "receipts/receipts_2024-03-05.csv", 1100, 0),
        ("F0000003", "catalogue", "catalogue.csv", 7, 1),
    ]
    ledger = pd.DataFrame(
        [
            {
                "file_id": file_id,
                "source": source,
                "path": f"/data/coffee/{path}",
                "version": 1,
                "bytes": rows * 61,
                "sha256": f"{index:064x}",
                "first_sold_at": datetime(2024, 3, 4, 8) if source == "receipts" else None,
                "last_sold_at": datetime(2024, 3, 4, 20) if source == "receipts" else None,
                "rows_read": rows,
                "rows_accepted": rows - bad,
                "rows_quarantined": bad,
                "status": "current",
                "ingested_at": datetime(2024, 3, 6, 2, 30),
                "reason": None,
                "settings_fingerprint": f"{100 + index:064x}",
            }
            for index, (file_id, source, path, rows, bad) in enumerate(files, start=1)
        ]
    )
    ledger["reason"] = ledger["reason"].astype("string")  # all null: keep it text
    reasons = pd.DataFrame(
        [
            {"file_id": "F0000001", "reason": "unparseable_field", "rows": 3},
            {"file_id": "F0000001", "reason": "unknown_store", "rows": 1},
            {"file_id": "F0000003", "reason": "duplicate_key", "rows": 1},
        ]
    )
    quarantine = pd.DataFrame(
        [
            _quarantined(
                "F0000001",
                "receipts",
                17,
                "unparseable_field",
                "amount 'x'",
                f"T1,1,S01,2024-03-04 09:00:00,C1,1,x,{RAW_CARD},0,sale",
            ),
            _quarantined(
                "F0000001",
                "receipts",
                18,
                "unparseable_field",
                "-amount",
                f"T1,2,S01,2024-03-04 09:00:00,C2,1,,{RAW_CARD},0,sale",
            ),
            _quarantined(
                "F0000001", "receipts", 19, "unparseable_field", "@amount", f"{RAW_CARD},T1,3"
            ),
            _quarantined(
                "F0000001",
                "receipts",
                40,
                "unknown_store",
                "+store S99",
                "T9,1,S99,2024-03-04 10:00:00,C1,1,4.5,,0,sale",
            ),
            _quarantined(
                "F0000003",
                "catalogue",
                5,
                "duplicate_key",
                "=sku C1 twice",
                '=HYPERLINK("http://invalid.example","C1"),Hilltop,coffee',
            ),
        ]
    )
    return ledger, reasons, quarantine


def _quarantined(file_id, source, line_no, reason, detail, text) -> dict[str, Any]:
    return {
        "file_id": file_id,
        "source": source,
        "path": f"/data/coffee/{file_id}.csv",
        "line_no": line_no,
        "reason": reason,
        "detail": detail,
        "original_text": text,
    }


def build_fixture_folder(
    base_dir: Path, export: dict[str, Any] | None = None, now: datetime | None = None
) -> Path:
    """Fill a fresh warehouse under `base_dir` and export one build; returns the build folder."""
    from demandprep.export.folder import export_build

    config = export_config(base_dir, export)
    con = duckdb.connect(str(config.warehouse.path))
    try:
        fill_warehouse(con)
        return export_build(fixture_context(con, config), now=now)
    finally:
        con.close()


# the export time of the shared build (tests/conftest.py: shared_export_build)
SHARED_NOW = datetime(2024, 4, 15, 2, 30, tzinfo=UTC)
