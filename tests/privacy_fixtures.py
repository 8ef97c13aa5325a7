"""An invented coffee aisle written as CSV files, with crafted bad lines in every card-bearing
source: each receipts rule broken with a card id written into the broken field, a repeated
receipt line, a line with too many fields, a repeated household, a household size that is not a
number. Card ids and receipt ids are distinctive strings, so finding one is never a coincidence.
"""

from __future__ import annotations

import csv
from datetime import date, datetime, timedelta
from pathlib import Path

from export_fixtures import export_config

from demandprep.config import ProjectConfig

STORES = ("S01", "S02", "S03")
# roaster, format, pack_grams, firm, roast
SKUS = {
    "K-HB250": ("Hilltop", "beans", 250, "Hilltop Roasting", "dark"),
    "K-HG500": ("Hilltop", "ground", 500, "Hilltop Roasting", "medium"),
    "K-LB250": ("Larkspur", "beans", 250, "Larkspur & Daughters", "light"),
    "K-MP100": ("Marrowby", "pods", 100, "Marrowby Coffee Works", "dark"),
}
FIRST_DAY = date(2024, 3, 4)
DAYS = 14
HOUSEHOLDS = 12
RECEIPTS_HEADER = [
    "ticket_no",
    "line_nr",
    "shop_id",
    "scanned_at",
    "item_code",
    "qty",
    "line_value",
    "disc",
    "kind",
    "loyalty_card",
]
# each crafted card id names the field it is planted in, so a hit says which rule leaked
PLANTED = {
    "sold_at": "LC-SOLDAT-4K7Q",
    "store": "LC-STORE-9X2M",
    "sku": "LC-SKU-3H8W",
    "line_kind": "LC-KIND-6T1Z",
    "line": "LC-LINE-2R5V",
    "quantity": "LC-QTY-8N4J",
    "amount": "LC-AMT-5P6D",
    "discount": "LC-DISC-7C3F",
    "extra_field": "LC-EXTRA-1B9K",
    "household_size": "LC-HHSIZE-4G2S",
}


def card_id(n: int) -> str:
    return f"LC-7Q93K1-{n:03d}"


def receipt_id(n: int) -> str:
    return f"RCPT-7Q93K1-{n:04d}"


def good_lines() -> list[dict[str, str]]:
    """Two visits a day per household over two weeks, each buying one or two coffees."""
    lines = []
    skus = list(SKUS)
    n = 0
    for day in range(DAYS):
        for household in range(HOUSEHOLDS):
            n += 1
            at = datetime.combine(FIRST_DAY + timedelta(days=day), datetime.min.time())
            at += timedelta(hours=8, minutes=household)
            bought = [skus[(day + household) % 4]] + ([skus[day % 4]] if household % 3 else [])
            for line, sku in enumerate(dict.fromkeys(bought), start=1):
                price = 4.0 + skus.index(sku) + 0.25 * ((day + household) % 3)
                lines.append(
                    receipt_line(
                        receipt=receipt_id(n),
                        line=str(line),
                        store=STORES[household % 3],
                        sold_at=at.strftime("%Y-%m-%d %H:%M:%S"),
                        sku=sku,
                        quantity="1",
                        amount=f"{price:.2f}",
                        card=card_id(household),
                    )
                )
    return lines


def receipt_line(**fields: str) -> dict[str, str]:
    """A receipts row in the file's column names; unset fields are good defaults."""
    row = {
        "receipt": "RCPT-7Q93K1-9000",
        "line": "1",
        "store": "S01",
        "sold_at": "2024-03-05 09:00:00",
        "sku": "K-HB250",
        "quantity": "1",
        "amount": "4.00",
        "discount": "",
        "line_kind": "sale",
        "card": card_id(0),
        **fields,
    }
    names = dict(zip(RECEIPT_NAMES, RECEIPTS_HEADER, strict=True))
    return {names[ours]: value for ours, value in row.items()}


RECEIPT_NAMES = [
    "receipt",
    "line",
    "store",
    "sold_at",
    "sku",
    "quantity",
    "amount",
    "discount",
    "line_kind",
    "card",
]


def crafted_lines() -> list[dict[str, str]]:
    """One line per rule a card id can break, the card id written into the broken field."""
    return [
        receipt_line(receipt=receipt_id(9001), sold_at=PLANTED["sold_at"]),
        receipt_line(receipt=receipt_id(9002), store=PLANTED["store"]),
        receipt_line(receipt=receipt_id(9003), sku=PLANTED["sku"]),
        receipt_line(receipt=receipt_id(9004), line_kind=PLANTED["line_kind"]),
        receipt_line(receipt=receipt_id(9005), line=PLANTED["line"]),
        receipt_line(receipt=receipt_id(9006), quantity=PLANTED["quantity"]),
        receipt_line(receipt=receipt_id(9007), amount=PLANTED["amount"]),
        receipt_line(receipt=receipt_id(9008), discount=PLANTED["discount"]),
        receipt_line(receipt=receipt_id(9009), sku=""),
        receipt_line(receipt=receipt_id(9010), sold_at="2023-01-02 10:00:00"),
        receipt_line(receipt=receipt_id(9011), quantity="0"),
        receipt_line(receipt=receipt_id(9012), amount="-3.00"),
        receipt_line(receipt=receipt_id(9013), line_kind="return"),
        # the same store, day, receipt and line as an accepted good line
        receipt_line(
            receipt=receipt_id(1),
            line="1",
            store=STORES[0],
            sold_at=FIRST_DAY.isoformat() + " 08:00:00",
            sku="K-HG500",
        ),
    ]


def write_inputs(folder: Path) -> None:
    """The invented aisle's files, crafted bad lines included."""
    (folder / "receipts").mkdir()
    with (folder / "receipts" / "receipts_2024-03.csv").open("w", newline="") as handle:
        writer = csv.DictWriter(handle, RECEIPTS_HEADER, lineterminator="\n")
        writer.writeheader()
        writer.writerows(good_lines() + crafted_lines())
        handle.write(f"{receipt_id(9014)},1,S01,2024-03-05 09:00:00,K-HB250,1,4.00,,sale,")
        handle.write(f"{card_id(1)},{PLANTED['extra_field']}\n")
    write_csv(
        folder / "catalogue.csv",
        ["item_code", "category", "roaster", "format", "pack_grams", "firm", "roast"],
        [[sku, "coffee", *values] for sku, values in SKUS.items()],
    )
    write_csv(folder / "stores.csv", ["shop_id"], [[store] for store in STORES])
    households = [[card_id(n), str(1 + n % 4)] for n in range(HOUSEHOLDS)]
    households.append([card_id(3), "2"])  # the same household delivered twice
    households.append([card_id(HOUSEHOLDS), PLANTED["household_size"]])
    write_csv(folder / "households.csv", ["loyalty_card", "hh_size"], households)


def write_csv(path: Path, header: list[str], rows: list[list]) -> None:
    with path.open("w", newline="") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)


def scan_config(folder: Path) -> ProjectConfig:
    """The export fixtures' config with every receipts column mapped and the catalogue's keys."""
    base = export_config(folder, {"extra_formats": ["csv", "dta"]}, choices=True)
    raw = base.model_dump(mode="json", exclude_unset=True)
    raw["sources"]["receipts"]["columns"].update(line="line_nr", discount="disc", line_kind="kind")
    raw["sources"]["receipts"].update(valid_from="2024-01-01", valid_to="2024-12-31")
    raw["sources"]["catalogue"]["columns"].update(
        roaster="roaster", format="format", pack_grams="pack_grams", firm="firm"
    )
    raw["products"].update(
        firm="firm", characteristics=["roast_level", "pack_grams"], equivalent_unit={"kind": "item"}
    )
    raw["market_size"] = {"visits": {"method": "visits", "units_per_visit": 3.0}}
    return ProjectConfig.model_validate(raw, context={"base_dir": folder})


def input_ids(folder: Path) -> set[str]:
    """Every card id and receipt id written into the input files (crafted ones included)."""
    ids = set(PLANTED.values())
    with (folder / "households.csv").open(newline="") as handle:
        ids |= {row["loyalty_card"] for row in csv.DictReader(handle)}
    with (folder / "receipts" / "receipts_2024-03.csv").open(newline="") as handle:
        for row in csv.DictReader(handle):
            ids |= {row["ticket_no"], row["loyalty_card"]}
    return {value for value in ids if value.startswith(("LC-", "RCPT-"))}
