"""Build-to-build drift: what this build changed since the previous published one.

The previous build is the folder `latest` named before this build was published. It is read
from its own files: its manifest (inputs, output rows, first stage, quick logit) and a few
columns of its Parquet files (market and product keys, shares, prices, the ledger), so the
comparison holds even after the warehouse changed. Shares and prices are compared for the
first market-size assumption (prices do not depend on it), matched on market and product.
Only the columns needed are read; DuckDB reads them straight from the two folders.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import duckdb

from demandprep.config import ProjectConfig
from demandprep.export.manifest import key_fingerprint_of

TOP_CHANGES = 10  # largest share and price changes listed
LISTED_KEYS = 20  # markets or products added or gone listed by name (all are counted)
NO_PREVIOUS = {"previous_build": None, "summary": "no previous build"}

KEYS_SQL = """
with

before as (
    select distinct key
    from (select columns(lambda c: c = $column) from read_parquet($before)) as t(key)
),

after as (
    select distinct key
    from (select columns(lambda c: c = $column) from read_parquet($after)) as t(key)
)

select
    (select count(*) from before) as before,
    (select count(*) from after) as after,
    (select count(*) from (from after except from before)) as added_count,
    (select count(*) from (from before except from after)) as gone_count,
    (select coalesce(list(key order by key), []) from (
        select key from (from after except from before) order by key limit $listed
    )) as added,
    (select coalesce(list(key order by key), []) from (
        select key from (from before except from after) order by key limit $listed
    )) as gone,
"""

# One pass over both share files: every (market, product) with its share and price then and now.
PAIRS_SQL = """
create or replace temp table drift_pairs as

with

before as (
    select market, product, share, price from read_parquet($before)
),

after as (
    select market, product, share, price from read_parquet($after)
),

final as (
    select
        market,
        product,
        before.share as share_before,
        after.share as share_after,
        before.price as price_before,
        after.price as price_after,
        before.market is not null as in_before,
        after.market is not null as in_after,
    from before
    full outer join after using (market, product)
)

select * from final
"""

PRODUCT_KEYS_SQL = """
with

products as (
    select product, bool_or(in_before) as in_before, bool_or(in_after) as in_after
    from drift_pairs
    group by product
)

select
    count(*) filter (where in_before) as before,
    count(*) filter (where in_after) as after,
    count(*) filter (where in_after and not in_before) as added_count,
    count(*) filter (where in_before and not in_after) as gone_count,
    coalesce(list(product order by product) filter (where in_after and not in_before), [])
        as added,
    coalesce(list(product order by product) filter (where in_before and not in_after), [])
        as gone,
from products
"""

# $column is 'share' or 'price' (bound, from a fixed list); rows in one build only are markets or
# products added or gone, counted there, not here.
CHANGES_SQL = """
with

matched as (
    select
        market,
        product,
        case when $column = 'share' then share_before else price_before end as value_before,
        case when $column = 'share' then share_after else price_after end as value_after,
    from drift_pairs
    where in_before and in_after
),

final as (
    select
        market,
        product,
        value_before as before,
        value_after as after,
        value_after - value_before as change,
    from matched
    where value_after <> value_before
)

select market, product, before, after, change
from final
order by abs(change) desc, market, product
limit $top
"""

QUARANTINE_SQL = """
select
    source,
    sum(rows_read)::bigint as rows_read,
    sum(rows_quarantined)::bigint as rows_quarantined,
from read_parquet($path)
where status = 'current'
group by source
order by source
"""


def since_last_build(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    previous: Path | None,
    folder: Path,
    current: dict[str, Any],
) -> dict[str, Any]:
    """The drift record for the manifest; `current` holds this build's manifest parts
    (inputs, outputs, facts, quick_logit)."""
    manifest = _previous_manifest(previous)
    if previous is None or manifest is None:
        return dict(NO_PREVIOUS)
    drift: dict[str, Any] = {
        "previous_build": previous.name,
        "previous_built_at": manifest.get("built_at"),
        "config_changed": manifest.get("config_hash") != config.config_hash(),
        "pseudonym_key_changed": _key_changed(manifest, config),
        "inputs": _inputs(manifest.get("inputs", []), current["inputs"]),
        "rows": _rows(manifest.get("outputs", []), current["outputs"]),
    }
    drift.update(_market_drift(con, config, previous, folder))
    drift["quarantine"] = _quarantine(con, previous, folder)
    drift["first_stage"] = _first_stage(manifest.get("facts", {}), current["facts"])
    drift["quick_logit"] = _quick_logit(manifest.get("quick_logit", []), current["quick_logit"])
    drift["summary"] = summary_line(drift)
    return drift


def summary_line(drift: dict[str, Any]) -> str:
    """One sentence of what moved, for the report's first screen and logs."""
    if drift.get("previous_build") is None:
        return NO_PREVIOUS["summary"]
    inputs = drift["inputs"]
    parts = ["config changed"] if drift.get("config_changed") else []
    parts += ["pseudonym key changed"] if drift.get("pseudonym_key_changed") else []
    parts += [
        f"{len(inputs['added'])} input files added, {len(inputs['gone'])} gone, "
        f"{len(inputs['changed'])} changed",
        f"rows changed in {sum(r['before'] != r['after'] for r in drift['rows'])} outputs",
    ]
    if "markets" in drift:
        markets, products = drift["markets"], drift["products"]
        parts.append(
            f"markets +{markets['added_count']}/-{markets['gone_count']}, "
            f"products +{products['added_count']}/-{products['gone_count']}"
        )
    return "; ".join(parts)


def _key_changed(manifest: dict[str, Any], config: ProjectConfig) -> bool:
    """Both builds made choices, with keys of other fingerprints (pseudonyms.py)."""
    before, now = manifest.get("pseudonym_key_fingerprint"), key_fingerprint_of(config)
    return before is not None and now is not None and before != now


def _previous_manifest(previous: Path | None) -> dict[str, Any] | None:
    if previous is None:
        return None
    try:
        return json.loads((previous / "manifest.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _inputs(before: Sequence[dict], after: Sequence[dict]) -> dict[str, list[str]]:
    old = {(i["source"], i["path"]): i.get("sha256") for i in before}
    new = {(i["source"], i["path"]): i.get("sha256") for i in after}
    return {
        "added": sorted(path for key, path in ((k, k[1]) for k in new) if key not in old),
        "gone": sorted(path for key, path in ((k, k[1]) for k in old) if key not in new),
        "changed": sorted(key[1] for key in new if key in old and old[key] != new[key]),
    }


def _rows(before: Sequence[dict], after: Sequence[dict]) -> list[dict[str, Any]]:
    old = {o["path"]: o["rows"] for o in before if "rows" in o}
    new = {o["path"]: o["rows"] for o in after if "rows" in o}
    return [
        {"path": path, "before": old.get(path), "after": new.get(path)}
        for path in sorted(old.keys() | new.keys())
    ]


def _market_drift(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, previous: Path, folder: Path
) -> dict[str, Any]:
    """Markets and products added or gone, and the largest share and price changes."""
    assumption = next(iter(config.market_size), None) if _market_build(config) else None
    if assumption is None:
        return {}
    shares = [b / f"shares_{assumption}.parquet" for b in (previous, folder)]
    markets = [b / f"markets_{assumption}.parquet" for b in (previous, folder)]
    if not all(path.is_file() for path in (*shares, *markets)):
        return {}
    con.execute(PAIRS_SQL, {"before": str(shares[0]), "after": str(shares[1])})
    try:
        [products] = con.execute(PRODUCT_KEYS_SQL).fetchall()
        return {
            "assumption": assumption,
            "markets": _keys(con, *markets, "market"),
            "products": _listed(products),
            "largest_share_changes": _changes(con, "share"),
            "largest_price_changes": _changes(con, "price"),
        }
    finally:
        con.execute("drop table if exists drift_pairs")


def _market_build(config: ProjectConfig) -> bool:
    return bool(getattr(config, "market_build_enabled", True))


def _keys(con: duckdb.DuckDBPyConnection, before: Path, after: Path, column: str) -> dict:
    params = {"before": str(before), "after": str(after), "column": column, "listed": LISTED_KEYS}
    [row] = con.execute(KEYS_SQL, params).fetchall()
    return _listed(row)


def _listed(row: tuple) -> dict[str, Any]:
    names = ("before", "after", "added_count", "gone_count", "added", "gone")
    found = dict(zip(names, row, strict=True))
    found["added"], found["gone"] = found["added"][:LISTED_KEYS], found["gone"][:LISTED_KEYS]
    return found


def _changes(con: duckdb.DuckDBPyConnection, column: str) -> list:
    rows = con.execute(CHANGES_SQL, {"column": column, "top": TOP_CHANGES}).fetchall()
    names = ("market", "product", "before", "after", "change")
    return [dict(zip(names, row, strict=True)) for row in rows]


def _quarantine(con: duckdb.DuckDBPyConnection, previous: Path, folder: Path) -> list[dict]:
    paths = [b / "ledger.parquet" for b in (previous, folder)]
    if not all(path.is_file() for path in paths):
        return []
    before, after = (
        {row[0]: row[1:] for row in con.execute(QUARANTINE_SQL, {"path": str(p)}).fetchall()}
        for p in paths
    )
    return [
        {
            "source": source,
            "rows_read_before": before.get(source, (None, None))[0],
            "rows_read_after": after.get(source, (None, None))[0],
            "rate_before": _rate(before.get(source)),
            "rate_after": _rate(after.get(source)),
        }
        for source in sorted(before.keys() | after.keys())
    ]


def _rate(counts: tuple[int, int] | None) -> float | None:
    if not counts or not counts[0]:
        return None
    return counts[1] / counts[0]


def _first_stage(before: dict, after: dict) -> dict[str, dict[str, Any]]:
    old, new = before.get("first_stage") or {}, after.get("first_stage") or {}
    return {
        name: {"before": old.get(name), "after": new.get(name)}
        for name in ("partial_f", "partial_f_robust")
    }


def _quick_logit(before: Sequence[dict], after: Sequence[dict]) -> list[dict[str, Any]]:
    old = {(e["assumption"], e["method"]): e for e in before}
    new = {(e["assumption"], e["method"]): e for e in after}
    keys = list(dict.fromkeys([*new, *old]))
    return [
        {
            "assumption": assumption,
            "method": method,
            "before": old.get((assumption, method), {}).get("price_coefficient"),
            "after": new.get((assumption, method), {}).get("price_coefficient"),
        }
        for assumption, method in keys
    ]
