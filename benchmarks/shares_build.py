"""Benchmark: the market stages vs one bare DuckDB query computing the same share table.

Both read the same warehouse (raw_lines, catalogue, stores) and produce the visits-based
store-week share table of the demo config (coffee, products roaster x format x pack grams, one
pack as the unit, one unit per visit, no universe cut, zero shares dropped). The stages include
everything a build does (settings, every SQL step, the checks and the pandera validation of
every table); the baseline is a single query with no checks. Runs alternate, the median of each
is printed with the ratio (target: at most 2).

The warehouse: a generated demo world (Parquet receipts) loaded with plain read_parquet, then
replicated with renamed stores until raw_lines reaches --lines (default 20 million), so the
lines keep the demo's mix of categories, voids and returns. Build it once and reuse it:

    .venv/bin/python benchmarks/shares_build.py --warehouse /tmp/shares_bench.duckdb
    .venv/bin/python benchmarks/shares_build.py --warehouse /tmp/shares_bench.duckdb --runs 3
    .venv/bin/python benchmarks/shares_build.py --lines 2e6 --warehouse /tmp/small.duckdb
"""

from __future__ import annotations

import argparse
import math
import statistics
import sys
import tempfile
import time
import tomllib
from pathlib import Path

import duckdb

REPO = Path(__file__).resolve().parents[1]
BASE_LINES = 2_700_000  # about the lines of the generated world that is replicated

LOAD_SQL = [
    """
    create or replace table world_lines as
    select
        ticket_no::varchar as receipt,
        row_no::bigint as line,
        shop_id::varchar as store,
        scanned_at::timestamp as sold_at,
        item_code::varchar as sku,
        qty::double as quantity,
        line_value::double as amount,
        coalesce(discount_value, 0)::double as discount,
        loyalty_card::varchar as card,
        line_type::varchar as line_kind,
    from read_parquet($receipts)
    """,
    """
    create or replace table catalogue as
    select item_code as sku, category, roaster, firm, format, pack_size, pack_unit, pack_grams,
        roast_level, organic
    from read_csv($catalogue)
    """,
    """
    create or replace table world_stores as
    select shop_id as store, region, chain, catchment_population as population
    from read_csv($stores)
    """,
]

REPLICATE_SQL = [
    """
    create or replace table raw_lines as
    select
        'bench' as file_id,
        row_number() over () as line_no,
        copy || '-' || receipt as receipt,
        line,
        store || '-' || copy as store,
        sold_at,
        sku,
        quantity,
        amount,
        discount,
        card,
        line_kind,
    from world_lines
    cross join (select range::varchar as copy from range($copies))
    """,
    """
    create or replace table stores as
    select store || '-' || copy as store, region, chain, population
    from world_stores
    cross join (select range::varchar as copy from range($copies))
    """,
]

# The baseline: the visits share table of the demo config in one query, no checks.
BARE_SQL = """
create or replace table bare_shares as
with
catalogue_products as (
    select sku, roaster || '|' || format || '|' || pack_grams::varchar as product, firm,
        format as nest, roast_level, organic, pack_grams
    from catalogue
    where category = 'coffee'
),
visits as (
    select store, date_trunc('week', sold_at)::date as period_start,
        -- a visit is (store, business day, receipt), as markets.receipt_ids_unique_per's default
        count(distinct (sold_at::date, receipt)) as visits
    from raw_lines
    where line_kind = 'sale'
    group by all
),
demand as (
    select lines.store, date_trunc('week', lines.sold_at)::date as period_start,
        catalogue_products.product,
        sum(lines.quantity) as units,
        sum(lines.amount - lines.discount) as net_revenue,
        sum(lines.amount) as gross_revenue,
        sum(lines.quantity) filter (where lines.discount <> 0) as promo_units
    from raw_lines as lines
    join catalogue_products using (sku)
    where lines.line_kind in ('sale', 'void')
    group by all
    having sum(lines.quantity) > 0
),
shares as (
    select demand.*, visits.visits::double as market_size,
        demand.units / visits.visits as share,
        1 - sum(demand.units) over (partition by demand.store, demand.period_start)
            / visits.visits as outside_share
    from demand
    join visits using (store, period_start)
)
select
    'visits' as assumption,
    shares.store || '/' || strftime(shares.period_start, '%Y-%m-%d') as market,
    shares.store as geography,
    shares.period_start,
    shares.product,
    products.firm,
    products.nest,
    products.roast_level,
    products.organic,
    products.pack_grams,
    shares.units,
    shares.units as equivalent_quantity,
    shares.net_revenue,
    shares.net_revenue / shares.units as price,
    shares.gross_revenue / shares.units as gross_price,
    coalesce(shares.promo_units, 0) / shares.units as promo_share,
    shares.share,
    shares.outside_share,
    ln(shares.share) - ln(shares.outside_share) as log_share_ratio,
    shares.share / sum(shares.share) over (
        partition by shares.store, shares.period_start, products.nest
    ) as within_nest_share,
    shares.market_size,
from shares
join (select distinct on (product) product, firm, nest, roast_level, organic, pack_grams
      from catalogue_products order by product, sku) as products using (product)
"""


def build_warehouse(path: Path, lines: int) -> None:
    """Generate a demo world, load it and replicate it to about `lines` raw lines."""
    from demandprep.demo.world import WorldSpec, generate_world

    with tempfile.TemporaryDirectory() as folder:
        world = Path(folder) / "world"
        spec = WorldSpec(
            n_stores=24,
            weeks=26,
            visits_per_store_day=220.0,
            receipt_format="parquet",
            fault_rate=0.0,
        )
        print(f"generating a demo world (~{BASE_LINES:,} lines) ...", flush=True)
        generate_world(world, spec)
        con = duckdb.connect(str(path))
        paths = {
            "receipts": str(world / "receipts" / "*" / "receipts_*.parquet"),
            "catalogue": str(world / "catalogue.csv"),
            "stores": str(world / "stores.csv"),
        }
        for statement in LOAD_SQL:
            con.execute(statement, {k: v for k, v in paths.items() if f"${k}" in statement})
    world_lines = con.execute("select count(*) from world_lines").fetchone()[0]
    copies = max(1, math.ceil(lines / world_lines))
    print(f"replicating its {world_lines:,} lines {copies} times ...", flush=True)
    for statement in REPLICATE_SQL:
        con.execute(statement, {"copies": copies})
    con.execute("drop table world_lines")
    con.execute("drop table world_stores")
    con.execute("checkpoint")
    con.close()


def benchmark_config(warehouse: Path):
    """The demo config with one visits assumption and no universe cut, on this warehouse."""
    from demandprep.config import ProjectConfig

    raw = tomllib.loads((REPO / "src/demandprep/templates/demo.toml").read_text())
    raw["products"]["universe"] = {"rest": "fringe"}
    raw["market_size"] = {"visits": {"method": "visits", "units_per_visit": 1.0}}
    raw["shares"] = {"outside_share_floor": 0.0, "zero_shares": "drop"}
    raw["warehouse"]["path"] = str(warehouse)
    return ProjectConfig.model_validate(raw, context={"base_dir": warehouse.parent})


def time_stages(con: duckdb.DuckDBPyConnection, config) -> tuple[float, dict[str, float]]:
    from demandprep.context import BuildContext
    from demandprep.market.stages import run_market_stages

    ctx = BuildContext(con=con, config=config)
    started = time.perf_counter()
    run_market_stages(ctx)
    return time.perf_counter() - started, ctx.timings


def time_bare(con: duckdb.DuckDBPyConnection) -> float:
    started = time.perf_counter()
    con.execute(BARE_SQL)
    return time.perf_counter() - started


def largest_difference(con: duckdb.DuckDBPyConnection) -> tuple[int, int, float]:
    """Row counts of both share tables and the largest difference over their shared values."""
    return con.execute(
        """
        select
            (select count(*) from shares),
            (select count(*) from bare_shares),
            max(greatest(
                abs(s.share - b.share), abs(s.outside_share - b.outside_share),
                abs(s.log_share_ratio - b.log_share_ratio), abs(s.price - b.price),
                abs(s.within_nest_share - b.within_nest_share)
            ))
        from shares s join bare_shares b using (market, product)
        """
    ).fetchone()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--warehouse", type=Path, default=Path("/tmp/demandprep_shares_bench.duckdb")
    )
    parser.add_argument("--lines", type=float, default=20e6)
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--threads", type=int, default=2)
    args = parser.parse_args()
    if not args.warehouse.exists():
        build_warehouse(args.warehouse, int(args.lines))
    config = benchmark_config(args.warehouse)
    con = duckdb.connect(str(args.warehouse), config={"threads": args.threads})
    lines = con.execute("select count(*) from raw_lines").fetchone()[0]
    print(f"warehouse {args.warehouse}: {lines:,} raw lines, {args.threads} threads")
    stages, bare = [], []
    for run in range(args.runs):
        seconds, timings = time_stages(con, config)
        stages.append(seconds)
        bare.append(time_bare(con))
        print(
            f"run {run + 1}: market stages {stages[-1]:.2f} s, bare query {bare[-1]:.2f} s, "
            f"ratio {stages[-1] / bare[-1]:.2f}"
        )
    slowest = sorted(timings.items(), key=lambda item: -item[1])[:4]
    print("slowest stages (last run): " + ", ".join(f"{name} {s:.2f} s" for name, s in slowest))
    ours, theirs, difference = largest_difference(con)
    print(f"rows: stages {ours:,}, bare {theirs:,}; largest difference {difference:.2e}")
    ratio = statistics.median(stages) / statistics.median(bare)
    paired = statistics.median(s / b for s, b in zip(stages, bare, strict=True))
    print(
        f"median: market stages {statistics.median(stages):.2f} s, "
        f"bare query {statistics.median(bare):.2f} s, ratio {ratio:.2f}; "
        f"median of per-run ratios {paired:.2f} (target <= 2)"
    )
    sys.exit(0 if ours == theirs else 1)


if __name__ == "__main__":
    main()
