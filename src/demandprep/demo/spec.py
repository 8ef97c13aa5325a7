"""The knobs of the invented demo world: the world's size and switches (WorldSpec) and the
true demand parameters the pipeline's estimates are checked against (DemandParams)."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from datetime import date
from typing import Any, Literal

ReceiptFormat = Literal["csv.gz", "parquet"]


@dataclass(frozen=True)
class DemandParams:
    """True parameters of packaged-coffee demand and pricing (see demandprep.demo.choices)."""

    intercept: float = -3.3
    alpha: float = 0.5  # price coefficient, utility per euro of shelf price per pack
    beta_roast_level: float = 0.1
    beta_organic: float = 0.3
    beta_pack_grams: float = 0.0045  # per gram of coffee in the pack
    format_effects: tuple[tuple[str, float], ...] = (
        ("beans", 0.0),
        ("ground", 0.0),
        ("capsules", 0.0),
    )
    rho: float = 1.2  # euros of regular price per unit of demand shock xi (endogeneity)
    nu_sd: float = 0.08  # euros, store-specific price noise independent of xi
    taste_sd: float = 0.8  # spread of households' persistent format tastes
    gamma: float = 1.0  # state-dependence bonus for the product of the last coffee purchase
    margin_share: float = 0.4  # share of the target price that is markup (rest is base cost)
    cost_ar: float = 0.6  # weekly AR(1) persistence of the green-coffee cost index components
    cost_common_sd: float = 0.10  # stationary sd of the index component shared by all firms
    cost_firm_sd: float = 0.06  # stationary sd of each firm's own index component
    promo_rate: float = 0.12  # probability a product is on promotion in a store-week
    promo_depths: tuple[float, ...] = (0.15, 0.20, 0.25, 0.30)
    listing_prob: float = 0.9  # probability a store lists a product at all
    stockout_prob: float = 0.03  # probability a listed product is missing in a store-week
    bulk_rate: float = 0.02  # probability a visit buys loose coffee (independent of the choice)
    bulk_listing_prob: float = 0.75

    def format_effect(self, fmt: str) -> float:
        """Utility shift of a coffee format (beans, ground, capsules)."""
        return dict(self.format_effects)[fmt]


@dataclass(frozen=True)
class WorldSpec:
    """Size, switches and fault rates of one demo world; WorldSpec() is the default demo.

    Card visits per store-day cannot exceed the store's households (each visits at most once a
    day): keep households well above card_share x visits_per_store_day x n_stores.
    """

    seed: int = 7
    n_stores: int = 24
    n_regions: int = 3
    start: date = date(2024, 1, 1)  # must be a Monday: weeks run Monday..Sunday from here
    weeks: int = 104
    visits_per_store_day: float = 60.0  # mean visits of an average-sized store on an average day
    households: int = 5000
    card_share: float = 0.6  # expected share of visits made with a loyalty card
    endogenous: bool = True
    heterogeneous: bool = True
    state_dependence: bool = True
    nested: bool = False
    nest_sigma: float = 0.5
    xi_sd: float = 0.3
    fault_rate: float = 0.001  # share of sale lines corrupted by one injected fault each
    return_rate: float = 0.005  # probability a visit starts with a return line
    void_rate: float = 0.01  # probability a visit contains a re-scan immediately voided
    receipt_format: ReceiptFormat = "csv.gz"
    max_noncoffee_lines: int = 8
    noncoffee_line_prob: float = 0.25  # lines = 1 + Binomial(max - 1, prob)
    late_opening_share: float = 0.1  # share of stores that open during the period
    params: DemandParams = field(default_factory=DemandParams)

    def __post_init__(self) -> None:
        _check_spec(self)

    @property
    def days(self) -> int:
        """Number of simulated days."""
        return 7 * self.weeks

    def to_dict(self) -> dict[str, Any]:
        """The spec as JSON-ready values (dates as ISO strings)."""
        out = asdict(self)
        out["start"] = self.start.isoformat()
        return out


def _check_spec(spec: WorldSpec) -> None:
    problems = []
    if spec.start.weekday() != 0:
        problems.append(f"start {spec.start} is not a Monday")
    if spec.n_stores < 1 or spec.weeks < 1 or spec.households < 1:
        problems.append("n_stores, weeks and households must be at least 1")
    if not 1 <= spec.n_regions <= min(spec.n_stores, 6):
        problems.append("n_regions must be between 1 and min(n_stores, 6)")
    if not 0.0 <= spec.nest_sigma < 1.0:
        problems.append("nest_sigma must be in [0, 1)")
    for name in ("card_share", "fault_rate", "return_rate", "void_rate", "noncoffee_line_prob"):
        if not 0.0 <= getattr(spec, name) <= 1.0:
            problems.append(f"{name} must be in [0, 1]")
    if spec.xi_sd < 0 or spec.visits_per_store_day <= 0:
        problems.append("xi_sd must be >= 0 and visits_per_store_day > 0")
    if spec.max_noncoffee_lines < 1:
        problems.append("max_noncoffee_lines must be at least 1")
    if spec.receipt_format not in ("csv.gz", "parquet"):
        problems.append("receipt_format must be 'csv.gz' or 'parquet'")
    if problems:
        raise ValueError("invalid WorldSpec: " + "; ".join(problems))
