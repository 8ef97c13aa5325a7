"""Generate the invented demo world: reference tables, weekly prices, and daily receipt drops.

    from demandprep.demo.world import WorldSpec, generate_world
    summary = generate_world(Path("world"), WorldSpec(seed=7, weeks=8))

Days are simulated in order (households carry their last purchase from day to day) and each
day's receipts are written before the next day starts, so memory holds one day at a time. Every
random draw comes from a stream keyed by (seed, purpose, day or week), so the same spec gives
byte-identical files. The true model is documented in demandprep.demo.choices (demand) and
demandprep.demo.prices (prices); truth.json repeats every parameter by name.
"""

from __future__ import annotations

import shutil
from collections.abc import Callable
from dataclasses import dataclass
from datetime import timedelta
from pathlib import Path

import polars as pl

from demandprep.demo.catalogue import Catalogue, build_catalogue
from demandprep.demo.choices import (
    HouseholdState,
    choice_probabilities,
    draw_choices,
    draw_skus,
    initial_household_state,
    mean_utilities,
    update_history,
    visit_utilities,
)
from demandprep.demo.columns import TABLE_FILES
from demandprep.demo.faults import FAULT_KINDS, enabled_kinds, inject_faults
from demandprep.demo.prices import (
    PriceBook,
    build_price_book,
    cost_shifters_table,
    market_sizes_table,
    shelf_prices_table,
    truth_shocks_table,
)
from demandprep.demo.receipts import RETURN, VOID, DayPrices, build_lines
from demandprep.demo.seeds import Stream, stream_rng
from demandprep.demo.spec import DemandParams, WorldSpec
from demandprep.demo.stores import Households, Stores, build_households, build_stores
from demandprep.demo.truth import build_truth
from demandprep.demo.visits import draw_visits
from demandprep.demo.writer import (
    format_lines,
    receipts_path,
    write_json,
    write_receipts,
    write_table,
)
from demandprep.errors import UserError

__all__ = [
    "DemandParams",
    "ReferenceTables",
    "WorldSpec",
    "WorldSummary",
    "build_reference_tables",
    "generate_world",
]

TRUTH_FILE = "truth.json"
FLOAT_PRECISION = {"shelf_prices": 2, "cost_shifters": 4, "truth_shocks": 6}


@dataclass(frozen=True)
class ReferenceTables:
    """Catalogue, stores and households of a spec, built without simulating any day."""

    catalogue: Catalogue
    stores: Stores
    households: Households


@dataclass(frozen=True)
class WorldSummary:
    """What generate_world wrote: paths, data-line counts, injected faults and visit totals."""

    out_dir: Path
    files: dict[str, Path]
    receipt_files: tuple[Path, ...]
    line_counts: dict[str, int]
    faults: dict[str, int]
    totals: dict[str, int]


def build_reference_tables(spec: WorldSpec) -> ReferenceTables:
    """Build the catalogue, stores and households tables alone (cheap, no receipts)."""
    stores = build_stores(spec)
    return ReferenceTables(build_catalogue(spec.seed), stores, build_households(spec, stores))


def generate_world(
    out_dir: Path,
    spec: WorldSpec | None = None,
    *,
    overwrite: bool = False,
    progress: Callable[[int, int], None] | None = None,
) -> WorldSummary:
    """Write a whole demo world under out_dir; progress(day_done, days) is called per day."""
    spec = spec or WorldSpec()
    out_dir = Path(out_dir)
    _prepare_folder(out_dir, overwrite)
    refs = build_reference_tables(spec)
    book = build_price_book(spec, refs.catalogue, refs.stores)
    files, line_counts = _write_tables(out_dir, spec, refs, book)
    receipt_files, faults, totals = _simulate_days(out_dir, spec, refs, book, progress)
    line_counts["receipts"] = totals["receipt_lines"]
    truth = build_truth(spec, refs.catalogue, faults, line_counts, totals)
    files["truth"] = out_dir / TRUTH_FILE
    write_json(truth, files["truth"])
    return WorldSummary(out_dir, files, tuple(receipt_files), line_counts, faults, totals)


def _prepare_folder(out_dir: Path, overwrite: bool) -> None:
    ours = [
        out_dir / "receipts",
        out_dir / TRUTH_FILE,
        *(out_dir / f for f in TABLE_FILES.values()),
    ]
    existing = [path for path in ours if path.exists()]
    if existing and not overwrite:
        raise UserError(
            f"demo world folder {out_dir} already holds generated files ({existing[0].name}).",
            hint="choose an empty folder or pass overwrite=True to replace them",
        )
    for path in existing:
        shutil.rmtree(path) if path.is_dir() else path.unlink()
    out_dir.mkdir(parents=True, exist_ok=True)


def _write_tables(out_dir: Path, spec: WorldSpec, refs: ReferenceTables, book: PriceBook):
    tables = {
        "catalogue": refs.catalogue.table,
        "stores": refs.stores.table,
        "households": refs.households.table,
        "shelf_prices": shelf_prices_table(spec, book, refs.catalogue, refs.stores),
        "market_sizes": market_sizes_table(spec, refs.stores),
        "cost_shifters": cost_shifters_table(spec, book, refs.catalogue),
        "truth_shocks": truth_shocks_table(spec, book, refs.catalogue, refs.stores),
    }
    files, counts = {}, {}
    for name, frame in tables.items():
        files[name] = out_dir / TABLE_FILES[name]
        write_table(frame, files[name], FLOAT_PRECISION.get(name))
        counts[name] = frame.height
    return files, counts


def _simulate_days(out_dir, spec: WorldSpec, refs: ReferenceTables, book: PriceBook, progress):
    state = initial_household_state(spec, len(refs.households.cards))
    faults = dict.fromkeys(FAULT_KINDS, 0)
    totals = dict.fromkeys(
        ("visits", "card_visits", "coffee_purchases", "receipt_lines", "returns", "voids"), 0
    )
    carry: pl.DataFrame | None = None
    paths = []
    for day in range(spec.days):
        frame, day_faults, resend = _simulate_day(spec, refs, book, state, day, totals)
        for kind, n in day_faults.items():
            faults[kind] += n
        if carry is not None and carry.height:
            frame = pl.concat([frame, carry])
        carry = resend
        path = receipts_path(out_dir, spec.start + timedelta(days=day), spec.receipt_format)
        write_receipts(frame, path, spec.receipt_format)
        totals["receipt_lines"] += frame.height
        paths.append(path)
        if progress is not None:
            progress(day + 1, spec.days)
    return paths, faults, totals


def _simulate_day(spec, refs: ReferenceTables, book: PriceBook, state: HouseholdState, day, totals):
    catalogue, stores, households = refs.catalogue, refs.stores, refs.households
    products, week = catalogue.products, day // 7
    visits = draw_visits(spec, stores, households, day, stream_rng(spec.seed, Stream.DAY, day, 0))
    delta = mean_utilities(spec.params, products, book.shelf_cents[week], book.xi[week])
    v = visit_utilities(
        spec, delta, book.available[week], products.nest, visits.store, visits.household, state
    )
    sigma = spec.nest_sigma if spec.nested else 0.0
    rng = stream_rng(spec.seed, Stream.DAY, day, 1)
    chosen = draw_choices(choice_probabilities(v, products.nest, sigma), rng.random(visits.count))
    skus = draw_skus(products, chosen, rng.random(visits.count))
    update_history(state, visits.household, chosen)
    prices = DayPrices(
        book.regular_cents[week],
        book.shelf_cents[week],
        book.bulk_available[week],
        book.bulk_cents[week],
    )
    lines = build_lines(
        spec, catalogue, visits, skus, prices, stream_rng(spec.seed, Stream.DAY, day, 2)
    )
    frame = format_lines(
        lines, visits, spec.start + timedelta(days=day), stores, households, catalogue
    )
    kinds = enabled_kinds(spec.receipt_format, has_next_day=day + 1 < spec.days)
    faulted = inject_faults(
        frame, spec.fault_rate, kinds, stream_rng(spec.seed, Stream.FAULTS, day)
    )
    totals["visits"] += visits.count
    totals["card_visits"] += int((visits.household >= 0).sum())
    totals["coffee_purchases"] += int((chosen >= 0).sum())
    totals["returns"] += int((lines.line_type == RETURN).sum())
    totals["voids"] += int((lines.line_type == VOID).sum())
    return faulted.frame, faulted.counts, faulted.resend
