"""The true packaged-coffee choice model of the demo world.

Each store visit i (store s, week t) chooses at most one coffee product j among the products on
the shelf J_st, or the outside option 0 (no packaged coffee, utility 0):

    delta_jst = intercept + beta_roast * roast_level_j + beta_organic * organic_j
                + beta_pack * pack_grams_j + format_effect_{g(j)} - alpha * p_jst + xi_jst
    v_ij      = delta_jst
                + eta_{h, g(j)}                 heterogeneous=True, loyalty household h only
                + gamma * 1[j = last_h]         state_dependence=True, h's last coffee product
    u_ij      = v_ij + eps_ij

p_jst is the shelf price (after promotion) in euros per pack, as written to shelf_prices.csv;
eta_hg ~ N(0, taste_sd^2) is drawn once per household and format g (beans, ground, capsules);
anonymous shoppers have no household terms. With eps iid Gumbel the choice probability is the
nested logit by format (Berry 1994 form), with sigma = nest_sigma when nested=True else 0:

    D_g  = sum_{k in J_st, g(k) = g} exp(v_ik / (1 - sigma))
    P_ij = exp(v_ij / (1 - sigma)) / D_g(j)^sigma / (1 + sum_g D_g^(1 - sigma))
    P_i0 = 1 / (1 + sum_g D_g^(1 - sigma))

so that with sigma = 0 it is the plain logit P_ij = exp(v_ij) / (1 + sum_k exp(v_ik))
(McFadden 1974), and for aggregate shares ln s_j - ln s_0 = delta_j + sigma ln s_j|g.
A buyer takes one pack of one SKU of j, the SKU drawn uniformly among j's blend variants.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from demandprep.demo.catalogue import FORMATS, CoffeeProducts
from demandprep.demo.seeds import Stream, stream_rng
from demandprep.demo.spec import DemandParams, WorldSpec


@dataclass
class HouseholdState:
    """Persistent tastes [household, format] and last coffee product bought (-1: none yet)."""

    taste: np.ndarray
    last_product: np.ndarray


def initial_household_state(spec: WorldSpec, n_households: int) -> HouseholdState:
    """Draw the households' format tastes (zero unless heterogeneous) and empty histories."""
    rng = stream_rng(spec.seed, Stream.HOUSEHOLDS, 1)
    taste = rng.normal(0.0, spec.params.taste_sd, size=(n_households, len(FORMATS)))
    if not spec.heterogeneous:
        taste = np.zeros_like(taste)
    return HouseholdState(taste=taste, last_product=np.full(n_households, -1, dtype=np.int64))


def utility_without_price(params: DemandParams, products: CoffeeProducts) -> np.ndarray:
    """[product] intercept + x_j'beta + format effect (the part of delta that is not price/xi)."""
    formats = np.array([params.format_effect(f) for f in products.format])
    return (
        params.intercept
        + params.beta_roast_level * products.roast_level
        + params.beta_organic * products.organic
        + params.beta_pack_grams * products.pack_grams
        + formats
    )


def mean_utilities(
    params: DemandParams, products: CoffeeProducts, shelf_cents: np.ndarray, xi: np.ndarray
) -> np.ndarray:
    """[store, product] delta_jst for one week from shelf prices (cents) and demand shocks."""
    base = utility_without_price(params, products)
    return base[None, :] - params.alpha * shelf_cents / 100.0 + xi


def visit_utilities(
    spec: WorldSpec,
    delta: np.ndarray,
    available: np.ndarray,
    nest: np.ndarray,
    store: np.ndarray,
    household: np.ndarray,
    state: HouseholdState,
) -> np.ndarray:
    """[visit, product] v_ij with household terms; -inf for products not on the shelf."""
    v = delta[store].copy()
    card = np.nonzero(household >= 0)[0]
    hh = household[card]
    if spec.heterogeneous:
        v[card] += state.taste[hh][:, nest]
    if spec.state_dependence:
        last = state.last_product[hh]
        has_last = last >= 0
        v[card[has_last], last[has_last]] += spec.params.gamma
    v[~available[store]] = -np.inf
    return v


def choice_probabilities(v: np.ndarray, nest: np.ndarray, sigma: float) -> np.ndarray:
    """[visit, 1 + product] probabilities, column 0 the outside option (nested logit form)."""
    scaled = v / (1.0 - sigma)
    n_nests = int(nest.max()) + 1
    log_d = np.stack([_logsumexp(scaled[:, nest == g]) for g in range(n_nests)], axis=1)
    log_inclusive = np.where(np.isfinite(log_d), (1.0 - sigma) * log_d, -np.inf)
    log_denominator = np.logaddexp(0.0, _logsumexp(log_inclusive))
    with np.errstate(invalid="ignore"):
        log_num = scaled - sigma * np.where(np.isfinite(log_d), log_d, 0.0)[:, nest]
    inside = np.where(np.isfinite(v), np.exp(log_num - log_denominator[:, None]), 0.0)
    outside = np.exp(-log_denominator)
    return np.column_stack([outside, inside])


def _logsumexp(x: np.ndarray) -> np.ndarray:
    # row-wise log(sum(exp(x))), -inf for rows that are all -inf (an empty nest)
    if x.shape[1] == 0:
        return np.full(x.shape[0], -np.inf)
    top = x.max(axis=1)
    safe = np.where(np.isfinite(top), top, 0.0)
    with np.errstate(divide="ignore"):
        return safe + np.log(np.exp(x - safe[:, None]).sum(axis=1))


def draw_choices(probabilities: np.ndarray, uniform: np.ndarray) -> np.ndarray:
    """Inverse-CDF draw per row: -1 for the outside option, else the product index."""
    cumulative = np.cumsum(probabilities, axis=1)
    cumulative /= cumulative[:, -1:]
    return (cumulative < uniform[:, None]).sum(axis=1) - 1


def draw_skus(products: CoffeeProducts, chosen: np.ndarray, uniform: np.ndarray) -> np.ndarray:
    """Catalogue row of the SKU bought for each chosen product (uniform among its variants)."""
    j = np.maximum(chosen, 0)
    offset = np.floor(uniform * products.sku_count[j]).astype(np.int64)
    return np.where(chosen >= 0, products.sku_start[j] + offset, -1)


def update_history(state: HouseholdState, household: np.ndarray, chosen: np.ndarray) -> None:
    """Remember each household's product when it bought packaged coffee on this visit."""
    bought = (household >= 0) & (chosen >= 0)
    state.last_product[household[bought]] = chosen[bought]
