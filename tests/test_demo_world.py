"""Tests of the invented demo world generator (demandprep.demo)."""

from __future__ import annotations

import csv
import gzip
import json
import math
import re
from collections import Counter, defaultdict
from dataclasses import replace
from datetime import date, datetime
from pathlib import Path

import duckdb
import numpy as np
import polars as pl
import pyarrow.parquet as pq
import pytest
from demo_worlds import ONE_STORE_WEEK, PLAIN_HOUSEHOLDS, QUIET, SMALL
from scipy import stats

from demandprep.demo import SAMPLE_SPEC, make_sample
from demandprep.demo.columns import SOURCE_COLUMNS, TABLE_FILES
from demandprep.demo.faults import FAULT_KINDS, TEXT_ONLY_KINDS
from demandprep.demo.world import WorldSpec, build_reference_tables, generate_world
from demandprep.errors import UserError

NUMBER = re.compile(r"^-?\d+(\.\d+)?$")
RECEIPT_TYPES = {
    "ticket_no": "VARCHAR",
    "row_no": "BIGINT",
    "shop_id": "VARCHAR",
    "scanned_at": "TIMESTAMP",
    "item_code": "VARCHAR",
    "qty": "DOUBLE",
    "line_value": "DOUBLE",
    "loyalty_card": "VARCHAR",
    "discount_value": "DOUBLE",
    "line_type": "VARCHAR",
}
READ_RECEIPTS = (
    "create table lines as select * from read_csv($path, header = true, columns = $columns,"
    " timestampformat = '%Y-%m-%d %H:%M:%S', store_rejects = true, ignore_errors = true)"
)


# ---------- helpers ----------


def receipt_files(world: Path) -> list[Path]:
    return sorted((world / "receipts").rglob("receipts_*"))


def receipt_rows(world: Path) -> list[list[str]]:
    """Every data row of every daily file, in file order (csv module)."""
    rows: list[list[str]] = []
    for path in receipt_files(world):
        with gzip.open(path, "rt", newline="") as handle:
            reader = csv.reader(handle)
            next(reader)
            rows.extend(reader)
    return rows


def read_table(world: Path, name: str) -> list[dict[str, str]]:
    with open(world / TABLE_FILES[name], newline="") as handle:
        return list(csv.DictReader(handle))


def header_of(path: Path) -> tuple[str, ...]:
    if path.suffix == ".parquet":
        return tuple(pq.read_schema(path).names)
    opener = gzip.open if path.suffix == ".gz" else open
    with opener(path, "rt", newline="") as handle:
        return tuple(next(csv.reader(handle)))


def is_timestamp(text: str) -> bool:
    try:
        datetime.strptime(text, "%Y-%m-%d %H:%M:%S")
    except ValueError:
        return False
    return True


def classify(row: list[str], codes: set[str], seen: set[tuple[str, str]]) -> str | None:
    """The fault kind of one receipts row, or None when the row is clean."""
    if len(row) != len(SOURCE_COLUMNS["receipts"]):
        return "extra_field"
    ticket, row_no, _shop, stamp, item, qty, value, _card, discount, line_type = row
    key = (ticket, row_no)
    repeated = key in seen
    seen.add(key)
    if ticket == "" or item == "":
        return "missing_field"
    if not all(NUMBER.match(text) for text in (qty, value, discount)):
        return "bad_number"
    if not is_timestamp(stamp):
        return "bad_timestamp"
    if item not in codes:
        return "unknown_sku"
    if line_type == "sale" and float(qty) <= 0:
        return "nonpositive_qty"
    if line_type == "sale" and float(value) < 0:
        return "negative_sale_value"
    return "duplicate_line" if repeated else None


def coffee_products(world: Path) -> dict[str, tuple[str, str, str]]:
    """item_code -> product key (roaster, format, pack_grams) for packaged coffee."""
    return {
        row["item_code"]: (row["roaster"], row["format"], row["pack_grams"])
        for row in read_table(world, "catalogue")
        if row["category"] == "coffee"
    }


def observed_and_true_shares(world: Path) -> tuple[int, dict, dict]:
    """Visits, coffee purchases per product and true probabilities in a one-store-week world."""
    truth = json.loads((world / "truth.json").read_text())
    params = truth["parameters"]
    catalogue = {row["item_code"]: row for row in read_table(world, "catalogue")}
    product_of = coffee_products(world)
    price = {
        product_of[r["item_code"]]: float(r["shelf_price"])
        for r in read_table(world, "shelf_prices")
        if r["item_code"] in product_of
    }
    xi = {
        (r["roaster"], r["format"], r["pack_grams"]): float(r["xi"])
        for r in read_table(world, "truth_shocks")
    }
    utility = {}
    for code, product in product_of.items():
        if product not in price:
            continue
        row = catalogue[code]
        utility[product] = (
            params["intercept"]
            + params["beta"]["roast_level"] * float(row["roast_level"])
            + params["beta"]["organic"] * float(row["organic"])
            + params["beta"]["pack_grams"] * float(row["pack_grams"])
            + params["format_effects"][row["format"]]
            - params["alpha"] * price[product]
            + xi[product]
        )
    rows = receipt_rows(world)
    visits = len({row[0] for row in rows})
    bought = Counter(product_of[row[4]] for row in rows if row[4] in product_of)
    return visits, bought, utility


def nested_logit_probabilities(utility: dict, sigma: float) -> dict:
    # Berry (1994) nested logit: P_j = exp(v_j/(1-s)) / D_g^s / (1 + sum_g D_g^(1-s))
    inclusive = defaultdict(float)
    for product, v in utility.items():
        inclusive[product[1]] += math.exp(v / (1 - sigma))
    denominator = 1 + sum(d ** (1 - sigma) for d in inclusive.values())
    probs = {
        product: math.exp(v / (1 - sigma)) / inclusive[product[1]] ** sigma / denominator
        for product, v in utility.items()
    }
    probs["outside"] = 1 / denominator
    return probs


def assert_counts_match(visits: int, bought: Counter, probs: dict) -> None:
    products = [p for p in probs if p != "outside"]
    counts = [bought.get(p, 0) for p in products]
    observed = [visits - sum(counts), *counts]
    expected = [visits * probs["outside"], *(visits * probs[p] for p in products)]
    for n, e in zip(observed, expected, strict=True):
        # binomial sampling error of a count: sd = sqrt(N p (1 - p))
        assert abs(n - e) < 4 * math.sqrt(e * (1 - e / visits)), (n, e)
    # reference: scipy.stats.chisquare goodness of fit
    assert stats.chisquare(observed, expected).pvalue > 1e-3


def coffee_histories(world: Path) -> dict[str, list[tuple[str, str, str]]]:
    """loyalty_card -> its packaged-coffee products in purchase order."""
    product_of = coffee_products(world)
    history: dict[str, list] = defaultdict(list)
    for row in receipt_rows(world):
        if row[7] and row[4] in product_of and row[9] == "sale":
            history[row[7]].append(product_of[row[4]])
    return history


# ---------- determinism and layout ----------


@pytest.mark.parametrize("receipt_format", ["csv.gz", "parquet"])
def test_same_spec_gives_byte_identical_files(tmp_path, receipt_format):
    spec = replace(SMALL, weeks=1, fault_rate=0.02, receipt_format=receipt_format)
    generate_world(tmp_path / "a", spec)
    generate_world(tmp_path / "b", spec)
    files_a = sorted(
        p.relative_to(tmp_path / "a") for p in (tmp_path / "a").rglob("*") if p.is_file()
    )
    files_b = sorted(
        p.relative_to(tmp_path / "b") for p in (tmp_path / "b").rglob("*") if p.is_file()
    )
    assert files_a == files_b and len(files_a) == 7 + len(TABLE_FILES) + 1
    for rel in files_a:
        assert (tmp_path / "a" / rel).read_bytes() == (tmp_path / "b" / rel).read_bytes(), rel


def test_other_seed_gives_other_receipts(tmp_path):
    generate_world(tmp_path / "a", replace(SMALL, weeks=1))
    generate_world(tmp_path / "b", replace(SMALL, weeks=1, seed=SMALL.seed + 1))
    day = Path("receipts/2024/receipts_2024-01-01.csv.gz")
    assert (tmp_path / "a" / day).read_bytes() != (tmp_path / "b" / day).read_bytes()


def test_gzip_header_has_no_time_and_no_file_name(small_world):
    head = receipt_files(small_world)[0].read_bytes()[:10]
    flags, mtime = head[3], int.from_bytes(head[4:8], "little")
    # RFC 1952: FLG bit 3 (FNAME) set when a file name follows; MTIME 0 means no time stamp
    assert flags & 0x08 == 0 and mtime == 0


def test_every_file_has_exactly_the_source_columns(small_world):
    for name, file_name in TABLE_FILES.items():
        assert header_of(small_world / file_name) == SOURCE_COLUMNS[name], name
    files = receipt_files(small_world)
    assert len(files) == SMALL.days
    assert {header_of(path) for path in files} == {SOURCE_COLUMNS["receipts"]}


def test_parquet_receipts_have_the_source_columns_and_types(tmp_path):
    generate_world(tmp_path / "w", replace(SMALL, weeks=1, receipt_format="parquet"))
    files = receipt_files(tmp_path / "w")
    assert files and all(path.suffix == ".parquet" for path in files)
    schema = pq.read_schema(files[0])
    assert tuple(schema.names) == SOURCE_COLUMNS["receipts"]
    assert str(schema.field("qty").type) == "double"
    assert str(schema.field("scanned_at").type).startswith("timestamp")


def test_receipt_files_are_one_per_day_under_the_year(small_world):
    names = [path.relative_to(small_world).as_posix() for path in receipt_files(small_world)]
    assert names[0] == "receipts/2024/receipts_2024-01-01.csv.gz"
    assert names[-1] == "receipts/2024/receipts_2024-01-14.csv.gz"


def test_generating_into_a_used_folder_needs_overwrite(tmp_path):
    spec = replace(SMALL, weeks=1)
    generate_world(tmp_path / "w", spec)
    with pytest.raises(UserError, match="already holds generated files"):
        generate_world(tmp_path / "w", spec)
    (tmp_path / "w" / "demandprep.toml").write_text("# kept\n")
    generate_world(tmp_path / "w", spec, overwrite=True)
    assert (tmp_path / "w" / "demandprep.toml").read_text() == "# kept\n"


def test_spec_rejects_a_start_that_is_not_a_monday():
    with pytest.raises(ValueError, match="not a Monday"):
        WorldSpec(start=date(2024, 1, 3))


def test_spec_rejects_nest_sigma_of_one():
    with pytest.raises(ValueError, match="nest_sigma"):
        WorldSpec(nested=True, nest_sigma=1.0)


# ---------- scenario minimums (default spec, no receipts) ----------


def test_default_spec_meets_the_scenario_minimums():
    refs = build_reference_tables(WorldSpec())
    catalogue = refs.catalogue.table.to_dicts()
    coffee = [row for row in catalogue if row["category"] == "coffee"]
    products = {(row["roaster"], row["format"], row["pack_grams"]) for row in coffee}
    chain = set(refs.stores.table["chain"])
    firms = {row["firm"] for row in coffee}
    assert len(coffee) >= 30 and len(products) >= 12
    assert len(firms - chain) >= 5 and chain <= firms
    assert {row["format"] for row in coffee} == {"beans", "ground", "capsules"}
    assert all(1 <= row["roast_level"] <= 5 and row["organic"] in (0, 1) for row in coffee)
    bulk = [row for row in catalogue if row["category"] == "coffee_bulk"]
    assert len(bulk) >= 2 and all(row["pack_unit"] == "kg" for row in bulk)
    grocery = [row for row in catalogue if not row["category"].startswith("coffee")]
    assert len(grocery) >= 100 and len({row["category"] for row in grocery}) >= 5
    assert all(row["roaster"] is None and row["roast_level"] is None for row in grocery)
    assert refs.stores.count >= 20 and refs.stores.table["region"].n_unique() == 3
    cards = refs.households.table["loyalty_card"].to_list()
    assert len(set(cards)) == len(cards) >= 5000
    assert all(len(card) == 16 and card.isdigit() for card in cards)
    assert set(refs.households.table["home_shop"]) <= set(refs.stores.shop_ids)


def test_default_spec_has_two_years_of_daily_drops_and_hundreds_of_visits_per_store_week():
    spec = WorldSpec()
    assert spec.days >= 2 * 364
    assert 7 * spec.visits_per_store_day >= 200


def test_catalogue_names_are_the_invented_ones():
    names = " ".join(build_reference_tables(SMALL).catalogue.table["item_name"].to_list())
    assert "Fernhill Select" in names and "Alder & Crane" in names


# ---------- truth.json ----------


def test_truth_lists_every_parameter_and_switch(small_world):
    truth = json.loads((small_world / "truth.json").read_text())
    params = truth["parameters"]
    for name in ("alpha", "intercept", "xi_sd", "rho", "taste_sd", "gamma", "nest_sigma"):
        assert isinstance(params[name], float), name
    assert set(params["beta"]) == {"roast_level", "organic", "pack_grams"}
    assert set(params["format_effects"]) == {"beans", "ground", "capsules"}
    assert truth["switches"] == {
        "endogenous": True,
        "heterogeneous": True,
        "state_dependence": True,
        "nested": False,
    }
    assert truth["seed"] == SMALL.seed and truth["spec"]["n_stores"] == SMALL.n_stores
    assert params["alpha"] == SMALL.params.alpha and params["rho"] == SMALL.params.rho
    assert set(truth["faults"]) == set(FAULT_KINDS)
    assert len(truth["products"]) >= 12


def test_truth_line_counts_match_the_files(small_world):
    counts = json.loads((small_world / "truth.json").read_text())["line_counts"]
    assert counts["receipts"] == len(receipt_rows(small_world))
    for name in TABLE_FILES:
        assert counts[name] == len(read_table(small_world, name)), name


def test_switches_off_zero_their_parameters_in_truth(tmp_path):
    spec = replace(SMALL, weeks=1, endogenous=False, heterogeneous=False, state_dependence=False)
    generate_world(tmp_path / "w", spec)
    truth = json.loads((tmp_path / "w" / "truth.json").read_text())
    assert truth["parameters"]["rho"] == 0.0 and truth["parameters"]["taste_sd"] == 0.0
    assert truth["parameters"]["gamma"] == 0.0 and truth["parameters"]["nest_sigma"] == 0.0
    assert not any(truth["switches"].values())


# ---------- faults ----------


def test_fault_counts_in_truth_equal_a_csv_module_count(faulty_world):
    truth = json.loads((faulty_world / "truth.json").read_text())
    codes = {row["item_code"] for row in read_table(faulty_world, "catalogue")}
    seen: set = set()
    found = Counter(classify(row, codes, seen) for row in receipt_rows(faulty_world))
    found.pop(None)
    assert dict(found) == {kind: n for kind, n in truth["faults"].items() if n}
    assert all(truth["faults"][kind] > 0 for kind in FAULT_KINDS)


def test_duckdb_rejects_exactly_the_text_faults_line_by_line(faulty_world):
    truth = json.loads((faulty_world / "truth.json").read_text())
    pattern = str(faulty_world / "receipts" / "*" / "*.csv.gz")
    con = duckdb.connect()
    # reference: DuckDB read_csv with store_rejects keeps each malformed line apart
    con.execute(READ_RECEIPTS, {"path": pattern, "columns": RECEIPT_TYPES})
    accepted = con.execute("select count(*) from lines").fetchall()[0][0]
    rejected = con.execute("select count(*) from reject_errors").fetchall()[0][0]
    assert rejected == sum(truth["faults"][kind] for kind in TEXT_ONLY_KINDS)
    assert accepted + rejected == truth["line_counts"]["receipts"]


def test_parquet_worlds_skip_text_faults(tmp_path):
    generate_world(
        tmp_path / "w", replace(SMALL, weeks=1, fault_rate=0.05, receipt_format="parquet")
    )
    faults = json.loads((tmp_path / "w" / "truth.json").read_text())["faults"]
    assert all(faults[kind] == 0 for kind in TEXT_ONLY_KINDS)
    assert faults["unknown_sku"] > 0 and faults["missing_field"] > 0
    table = pl.read_parquet(receipt_files(tmp_path / "w"))
    missing = table.filter(pl.col("ticket_no").is_null() | pl.col("item_code").is_null())
    assert missing.height == faults["missing_field"]


def test_duplicates_resend_a_line_of_the_previous_day(faulty_world):
    files = receipt_files(faulty_world)
    keys_by_day = []
    for path in files:
        with gzip.open(path, "rt", newline="") as handle:
            keys_by_day.append([(r[0], r[1]) for r in list(csv.reader(handle))[1:] if r[0]])
    for previous, today in zip(keys_by_day, keys_by_day[1:], strict=False):
        repeated = set(today) & set(previous)
        assert repeated and all(
            ticket.split("-")[1] != today[0][0].split("-")[1] for ticket, _ in repeated
        )


# ---------- receipt content ----------


def test_coffee_lines_are_priced_from_the_shelf_price_file(clean_world):
    shelf = {
        (r["shop_id"], r["week_start"], r["item_code"]): (float(r["shelf_price"]), r["on_promo"])
        for r in read_table(clean_world, "shelf_prices")
    }
    product_of = coffee_products(clean_world)
    checked = 0
    for row in receipt_rows(clean_world):
        if row[4] not in product_of or row[9] != "sale":
            continue
        day = date.fromisoformat(row[3][:10])
        week = date.fromordinal(day.toordinal() - day.weekday()).isoformat()
        price, promo = shelf[(row[2], week, row[4])]
        assert row[5] == "1"
        assert round(float(row[6]) - float(row[8]), 2) == price
        assert (float(row[8]) > 0) == (promo == "1")
        checked += 1
    assert checked > 100


def test_every_visit_has_a_grocery_line_and_at_most_one_packaged_coffee(clean_world):
    product_of = coffee_products(clean_world)
    grocery, coffee = Counter(), Counter()
    for row in receipt_rows(clean_world):
        if row[4].startswith("G"):
            grocery[row[0]] += 1
        elif row[4] in product_of:
            coffee[row[0]] += 1
    assert set(coffee) <= set(grocery)
    assert max(coffee.values()) == 1
    assert min(grocery.values()) >= 1 and max(grocery.values()) <= SMALL.max_noncoffee_lines


def test_coffee_purchase_rate_is_in_the_designed_range(small_world):
    totals = json.loads((small_world / "truth.json").read_text())["totals"]
    rate = totals["coffee_purchases"] / totals["visits"]
    assert 0.15 <= rate <= 0.30
    assert 0.5 <= totals["card_visits"] / totals["visits"] <= 0.7


def test_voids_cancel_the_line_scanned_just_before(small_world):
    rows = receipt_rows(small_world)
    voids = 0
    for before, row in zip(rows, rows[1:], strict=False):
        if row[9] != "void":
            continue
        voids += 1
        assert before[0] == row[0] and before[9] == "sale" and before[4] == row[4]
        for column in (5, 6, 8):
            assert float(row[column]) == -float(before[column])
    assert voids > 0


def test_quantities_are_whole_packs_or_kilograms_with_three_decimals(clean_world):
    by_weight = {
        r["item_code"] for r in read_table(clean_world, "catalogue") if r["pack_unit"] == "kg"
    }
    for row in receipt_rows(clean_world):
        if row[4] in by_weight:
            assert re.fullmatch(r"-?\d+\.\d{3}", row[5]), row
        else:
            assert re.fullmatch(r"-?\d+", row[5]), row
        assert re.fullmatch(r"-?\d+\.\d{2}", row[6]) and re.fullmatch(r"-?\d+\.\d{2}", row[8])


def test_returns_and_voids_are_negative(small_world):
    kinds = Counter()
    for row in receipt_rows(small_world):
        if row[9] in ("return", "void"):
            kinds[row[9]] += 1
            assert float(row[5]) < 0 and float(row[6]) < 0
    assert kinds["return"] > 0 and kinds["void"] > 0


def test_shelf_availability_varies_across_store_weeks(small_world):
    on_shelf = Counter(
        (r["shop_id"], r["week_start"]) for r in read_table(small_world, "shelf_prices")
    )
    assert len(set(on_shelf.values())) > 1


def test_market_sizes_cover_every_open_store_week(small_world):
    sizes = read_table(small_world, "market_sizes")
    assert len(sizes) == SMALL.n_stores * SMALL.weeks
    assert all(int(r["potential_units"]) > 0 for r in sizes)


# ---------- the choice model against its formula ----------


def test_observed_shares_match_the_logit_probabilities(demo_worlds):
    visits, bought, utility = observed_and_true_shares(demo_worlds.folder(ONE_STORE_WEEK))
    # McFadden (1974): P_j = exp(v_j) / (1 + sum_k exp(v_k)), v_j from truth.json and the files
    denominator = 1 + sum(math.exp(v) for v in utility.values())
    probs = {product: math.exp(v) / denominator for product, v in utility.items()}
    probs["outside"] = 1 / denominator
    assert visits > 30_000 and len(utility) >= 10
    assert_counts_match(visits, bought, probs)


def test_nested_shares_match_the_berry_formula(nested_store_week_world):
    visits, bought, utility = observed_and_true_shares(nested_store_week_world)
    assert_counts_match(visits, bought, nested_logit_probabilities(utility, 0.6))


def test_plain_logit_probabilities_fail_a_nested_world(nested_store_week_world):
    # the check above can fail: the same nested world is far from the plain-logit probabilities
    visits, bought, utility = observed_and_true_shares(nested_store_week_world)
    with pytest.raises(AssertionError):
        assert_counts_match(visits, bought, nested_logit_probabilities(utility, 0.0))


def regular_price_slope_on_xi(world: Path) -> float:
    """Slope of non-promotion shelf prices on xi, within product x week (prices docstring)."""
    product_of = coffee_products(world)
    xi = {
        (r["shop_id"], r["week_start"], (r["roaster"], r["format"], r["pack_grams"])): float(
            r["xi"]
        )
        for r in read_table(world, "truth_shocks")
    }
    groups: dict = defaultdict(list)
    for r in read_table(world, "shelf_prices"):
        if r["item_code"] in product_of and r["on_promo"] == "0":
            product = product_of[r["item_code"]]
            key = (r["shop_id"], r["week_start"], product)
            groups[(r["week_start"], product)].append((float(r["shelf_price"]), xi[key]))
    prices, shocks = [], []
    for members in groups.values():
        p, x = np.array(members).T
        prices.extend(p - p.mean())
        shocks.extend(x - x.mean())
    return float(np.dot(shocks, prices) / np.dot(shocks, shocks))


@pytest.mark.parametrize("endogenous", [True, False])
def test_prices_load_on_xi_only_when_endogenous(tmp_path, endogenous):
    spec = replace(SMALL, n_stores=20, weeks=6, visits_per_store_day=1.0, endogenous=endogenous)
    generate_world(tmp_path / "w", spec)
    expected = spec.params.rho if endogenous else 0.0
    assert abs(regular_price_slope_on_xi(tmp_path / "w") - expected) < 0.1


def repeat_rate(history: dict) -> float:
    pairs = [
        (a, b)
        for products in history.values()
        for a, b in zip(products, products[1:], strict=False)
    ]
    return sum(a == b for a, b in pairs) / len(pairs)


def format_concentration(history: dict) -> float:
    # mean over households of the Herfindahl index of their purchases across formats
    values = []
    for products in history.values():
        if len(products) >= 5:
            counts = Counter(product[1] for product in products)
            values.append(sum((n / len(products)) ** 2 for n in counts.values()))
    return float(np.mean(values))


def test_state_dependence_makes_households_repeat_their_last_product(demo_worlds):
    on = coffee_histories(demo_worlds.folder(replace(PLAIN_HOUSEHOLDS, state_dependence=True)))
    off = coffee_histories(demo_worlds.folder(PLAIN_HOUSEHOLDS))
    assert repeat_rate(on) > repeat_rate(off) + 0.05


def test_heterogeneous_households_concentrate_on_their_favourite_format(demo_worlds):
    on = coffee_histories(demo_worlds.folder(replace(PLAIN_HOUSEHOLDS, heterogeneous=True)))
    off = coffee_histories(demo_worlds.folder(PLAIN_HOUSEHOLDS))
    assert format_concentration(on) > format_concentration(off) + 0.03


@pytest.mark.slow
def test_ols_understates_the_price_coefficient_and_hausman_iv_recovers_it(tmp_path):
    import statsmodels.api as sm
    from linearmodels.iv import IV2SLS

    spec = WorldSpec(
        seed=41,
        n_stores=10,
        weeks=10,
        visits_per_store_day=400.0,
        households=20000,
        heterogeneous=False,
        state_dependence=False,
        **QUIET,
    )
    world = tmp_path / "w"
    generate_world(world, spec)
    frame = store_week_shares(world)
    exog = sm.add_constant(frame[["roast_level", "organic", "pack_grams"]])
    # reference: statsmodels OLS and linearmodels IV2SLS; Berry (1994) logit inversion
    ols = sm.OLS(frame["y"], exog.join(frame["price"])).fit()
    iv = IV2SLS(frame["y"], exog, frame[["price"]], frame[["hausman"]]).fit()
    alpha = spec.params.alpha
    assert -ols.params["price"] < alpha - 3 * ols.bse["price"]
    assert abs(-iv.params["price"] - alpha) < 3 * iv.std_errors["price"]
    assert iv.first_stage.diagnostics["f.stat"].iloc[0] > 10  # Staiger & Stock (1997)


def store_week_shares(world: Path):
    """Store-week shares with visits as market size, log share ratio and the Hausman price."""
    con = duckdb.connect()
    pattern = str(world / "receipts" / "*" / "*.csv.gz")
    con.execute(READ_RECEIPTS, {"path": pattern, "columns": RECEIPT_TYPES})
    con.execute(
        "create table cat as select * from read_csv($p)", {"p": str(world / "catalogue.csv")}
    )
    con.execute(
        "create table shelf as select * from read_csv($p)", {"p": str(world / "shelf_prices.csv")}
    )
    frame = con.execute(
        """
        with visits as (
            select shop_id, date_trunc('week', scanned_at)::date as week_start,
                count(distinct ticket_no) as visits
            from lines group by all
        ),
        bought as (
            select shop_id, date_trunc('week', scanned_at)::date as week_start,
                roaster, format, pack_grams, count(*) as units
            from lines join cat using (item_code)
            where category = 'coffee' group by all
        ),
        offered as (
            select shop_id, week_start, roaster, format, pack_grams,
                any_value(roast_level) as roast_level, any_value(organic) as organic,
                avg(shelf_price) as price
            from shelf join cat using (item_code) where category = 'coffee' group by all
        )
        select offered.*, units, visits
        from offered join visits using (shop_id, week_start)
        join bought using (shop_id, week_start, roaster, format, pack_grams)
        """
    ).df()
    inside = frame.groupby(["shop_id", "week_start"])["units"].transform("sum")
    frame["y"] = np.log(frame["units"] / frame["visits"]) - np.log(1 - inside / frame["visits"])
    same = frame.groupby(["week_start", "roaster", "format", "pack_grams"])["price"]
    frame["hausman"] = (same.transform("sum") - frame["price"]) / (same.transform("count") - 1)
    return frame.astype({"roast_level": float, "organic": float, "pack_grams": float})


# ---------- the committed sample ----------


def test_committed_sample_is_what_make_sample_writes(tmp_path, coffee_sample):
    make_sample(tmp_path / "sample")
    made = sorted(
        p.relative_to(tmp_path / "sample") for p in (tmp_path / "sample").rglob("*") if p.is_file()
    )
    assert len(made) == SAMPLE_SPEC.days + len(TABLE_FILES) + 2
    for rel in made:
        assert (coffee_sample / rel).read_bytes() == (tmp_path / "sample" / rel).read_bytes(), rel
