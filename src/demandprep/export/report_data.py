"""The small summaries the report plots, aggregated in DuckDB so large tables stay out of memory."""

from __future__ import annotations

import duckdb
import pandas as pd

MAX_PRODUCTS = 30
MAX_FILES = 30
MAX_MARKET_LINES = 12


def share_histogram(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Counts of inside-product shares in tenth-of-a-decade bins of log10(share), per assumption."""
    return con.sql(
        """
        select assumption, floor(log10(share) * 10) / 10 as log10_share, count(*) as products
        from share_table
        where share > 0 and not coalesce(is_fringe, false)
        group by all
        order by assumption, log10_share
        """
    ).df()


def outside_share_bands(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Per assumption and period: the 10th, 50th and 90th percentile of market outside shares."""
    return con.sql(
        """
        select
            assumption,
            period_start,
            quantile_cont(outside_share, 0.1) as p10,
            quantile_cont(outside_share, 0.5) as p50,
            quantile_cont(outside_share, 0.9) as p90,
            count(*) as markets
        from markets
        group by all
        order by assumption, period_start
        """
    ).df()


def outside_share_lines(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Each market's outside share over time, when there are few enough geographies to draw."""
    [(count,)] = con.execute("select count(distinct geography) from markets").fetchall()
    if count > MAX_MARKET_LINES:
        return pd.DataFrame(columns=["assumption", "geography", "period_start", "outside_share"])
    return con.sql(
        """
        select assumption, geography, period_start, outside_share
        from markets
        order by assumption, geography, period_start
        """
    ).df()


def price_quantiles(con: duckdb.DuckDBPyConnection, assumption: str) -> pd.DataFrame:
    """Price dispersion across markets of the best-selling products (prices are assumption-free)."""
    return con.sql(
        """
        with product_prices as (
            select product, price, units
            from share_table
            where assumption = $assumption and price is not null
        ),

        top_products as (
            select product
            from product_prices
            group by product
            order by sum(units) desc, product
            limit $limit
        )

        select
            product,
            min(price) as low,
            quantile_cont(price, 0.25) as q1,
            quantile_cont(price, 0.5) as median,
            quantile_cont(price, 0.75) as q3,
            max(price) as high,
            count(*) as markets
        from product_prices
        where product in (select product from top_products)
        group by product
        order by median desc, product
        """,
        params={"assumption": assumption, "limit": MAX_PRODUCTS},
    ).df()


def ledger_by_file(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Accepted rows and quarantined rows by reason, for the files with the most quarantined."""
    return con.sql(
        """
        with current_files as (
            select file_id, path, rows_accepted, rows_quarantined
            from ledger
            where status = 'current'
        ),

        shown as (
            select *
            from current_files
            order by rows_quarantined desc, path
            limit $limit
        )

        select
            shown.path,
            'accepted' as outcome,
            shown.rows_accepted as rows,
            shown.rows_quarantined
        from shown
        union all
        select shown.path, reasons.reason, reasons.rows, shown.rows_quarantined
        from shown
        join ledger_reasons as reasons using (file_id)
        order by rows_quarantined desc, path, outcome
        """,
        params={"limit": MAX_FILES},
    ).df()


def ledger_totals(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Rows read, accepted and quarantined per source over the current files."""
    return con.sql(
        """
        select
            source,
            count(*) as files,
            sum(rows_read)::bigint as rows_read,
            sum(rows_accepted)::bigint as rows_accepted,
            sum(rows_quarantined)::bigint as rows_quarantined
        from ledger
        where status = 'current'
        group by source
        order by source
        """
    ).df()


def quarantine_reasons(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Quarantined rows per reason over the current files, with each reason's meaning."""
    frame = con.sql(
        """
        select reasons.reason, sum(reasons.rows)::bigint as rows
        from ledger_reasons as reasons
        join ledger using (file_id)
        where ledger.status = 'current'
        group by reasons.reason
        order by rows desc, reasons.reason
        """
    ).df()
    try:
        from demandprep.ingest.reasons import REASONS
    except ImportError:
        REASONS = {}  # noqa: N806
    frame["meaning"] = [REASONS.get(reason, "") for reason in frame["reason"]]
    return frame


def zero_share_counts(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Zero-share product rows per period: per assumption in the share table, and before the
    zero-share policy (products on the shelf that sold nothing, from `market_zero_sales`)."""
    frame = con.sql(
        """
        select assumption as series, period_start, count(*) filter (where share = 0) as rows
        from share_table
        group by all
        order by series, period_start
        """
    ).df()
    [(has_zero_sales,)] = con.execute(
        "select count(*) from duckdb_tables() where table_name = 'market_zero_sales' "
        "and schema_name = current_schema()"
    ).fetchall()
    if not has_zero_sales:
        return frame
    # every period of the share table, so a period without zeros shows 0 rather than nothing
    before = con.sql(
        """
        with periods as (select distinct period_start from share_table)
        select
            'on the shelf, no sales' as series,
            periods.period_start,
            count(zero.product) as rows
        from periods
        left join market_zero_sales as zero using (period_start)
        group by all
        order by periods.period_start
        """
    ).df()
    return pd.concat([before, frame], ignore_index=True)


def mean_outside_share(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Mean and range of the market outside share per assumption."""
    return con.sql(
        """
        select
            assumption,
            avg(outside_share) as mean_outside_share,
            min(outside_share) as min_outside_share,
            max(outside_share) as max_outside_share,
            count(*) as markets
        from markets
        group by assumption
        order by assumption
        """
    ).df()


def table_exists(con: duckdb.DuckDBPyConnection, name: str) -> bool:
    """Whether the warehouse holds a table or view of this name."""
    [(count,)] = con.execute(
        "select count(*) from (select table_name as name from duckdb_tables() "
        "where schema_name = current_schema() union all select view_name from duckdb_views() "
        "where schema_name = current_schema()) where name = $name",
        {"name": name},
    ).fetchall()
    return count > 0


def market_headline(con: duckdb.DuckDBPyConnection) -> dict[str, int]:
    """Markets, inside products and product-market rows of the build (one assumption's view)."""
    row = con.execute(
        """
        with first_assumption as (select min(assumption) as assumption from share_table)
        select
            count(distinct market),
            count(distinct product) filter (where not coalesce(is_fringe, false)),
            count(*),
        from share_table
        where assumption = (select assumption from first_assumption)
        """
    ).fetchall()[0]
    return {"markets": row[0], "products": row[1], "product_market_rows": row[2]}


def lines_accepted(con: duckdb.DuckDBPyConnection) -> dict[str, int]:
    """Receipt lines read, accepted and quarantined over the current receipts files."""
    row = con.execute(
        """
        select
            coalesce(sum(rows_read), 0)::bigint,
            coalesce(sum(rows_accepted), 0)::bigint,
            coalesce(sum(rows_quarantined), 0)::bigint,
            count(*),
        from ledger
        where status = 'current' and source = 'receipts'
        """
    ).fetchall()[0]
    return dict(zip(("read", "accepted", "quarantined", "files"), row, strict=True))


def current_file_count(con: duckdb.DuckDBPyConnection) -> int:
    """Current input files in the ledger (the ledger chart shows at most MAX_FILES of them)."""
    [(count,)] = con.execute("select count(*) from ledger where status = 'current'").fetchall()
    return count


def zero_sales_total(con: duckdb.DuckDBPyConnection) -> int | None:
    """Product-markets on the shelf without sales, before the zero-share policy; None if unknown."""
    if not table_exists(con, "market_zero_sales"):
        return None
    [(count,)] = con.execute("select count(*) from market_zero_sales").fetchall()
    return count


def choice_summary(con: duckdb.DuckDBPyConnection) -> dict[str, float]:
    """Occasions, choosers, rows, mean alternatives per occasion and the holdout's size."""
    # the choice build's counts per day (choices/report_counts.py): one chosen row per
    # occasion counts occasions without a distinct count over the long table
    occasions, rows, holdout_occasions = con.execute(
        """
        select
            coalesce(sum(count) filter (where measure = 'occasions'), 0)::bigint,
            coalesce(sum(count) filter (where measure = 'rows'), 0)::bigint,
            coalesce(sum(count) filter (where measure = 'holdout_occasions'), 0)::bigint,
        from choice_report_counts
        """
    ).fetchall()[0]
    choosers, holdout_choosers = con.execute(
        "select count(*), count(*) filter (where holdout) from choosers"
    ).fetchall()[0]
    return {
        "occasions": occasions,
        "choosers": choosers,
        "rows": rows,
        "alternatives_per_occasion": rows / occasions if occasions else None,
        "holdout_choosers": holdout_choosers,
        "holdout_occasions": holdout_occasions,
    }


def alternatives_per_occasion(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """How many occasions offer each number of alternatives (rows per occasion)."""
    return con.sql(
        """
        select alternatives, sum(count)::bigint as occasions
        from choice_report_counts
        where measure = 'offered'
        group by alternatives
        order by alternatives
        """
    ).df()


def chosen_shares(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Share of occasions choosing each alternative, the most chosen first (at most 20)."""
    return con.sql(
        """
        with chosen as (
            select alternative, sum(count)::bigint as occasions
            from choice_report_counts
            where measure = 'chosen'
            group by alternative
        ),
        total as (select sum(occasions)::bigint as occasions from chosen)
        select alternative, chosen.occasions / total.occasions as share
        from chosen, total
        order by share desc, alternative
        limit 20
        """
    ).df()


def loyalty_distribution(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Rows per tenth of the smoothed loyalty (0 to 1), outside the burn-in."""
    return con.sql(
        """
        with bins as (select range / 10 as low from range(10)),
        binned as (
            select loyalty_low as low, sum(count)::bigint as rows,
            from choice_report_counts
            where measure = 'loyalty'
            group by 1
        )
        select
            bins.low,
            coalesce(binned.rows, 0) as rows,
        from bins
        left join binned using (low)
        order by bins.low
        """
    ).df()
