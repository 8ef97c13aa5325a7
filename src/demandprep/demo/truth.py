"""truth.json: every true parameter by name, the switches, the spec, and what was written."""

from __future__ import annotations

from typing import Any

from demandprep.demo.catalogue import Catalogue
from demandprep.demo.choices import utility_without_price
from demandprep.demo.spec import WorldSpec

UTILITY_FORMULA = (
    "v_ij = intercept + beta.roast_level*roast_level_j + beta.organic*organic_j"
    " + beta.pack_grams*pack_grams_j + format_effect[format_j] - alpha*shelf_price_jst + xi_jst"
    " + taste[h, format_j] (heterogeneous, loyalty households)"
    " + gamma*1[j = last product bought by h] (state_dependence); outside option v_i0 = 0;"
    " P_ij = exp(v_ij/(1-sigma)) / D_g^sigma / (1 + sum_g D_g^(1-sigma)),"
    " D_g = sum_{k in g} exp(v_ik/(1-sigma)), sigma = nest_sigma if nested else 0"
)
PRICE_FORMULA = (
    "regular_jst = base_cost_j * green_coffee_index[firm_j, t] + markup_j + rho*xi_jst + nu_jst"
    " (euros, rounded to cents, rho = 0 unless endogenous); shelf_price = regular*(1-depth)"
    " in promotion store-weeks (rounded to cents), else regular"
)


def build_truth(
    spec: WorldSpec,
    catalogue: Catalogue,
    faults: dict[str, int],
    line_counts: dict[str, int],
    totals: dict[str, int],
) -> dict[str, Any]:
    """The truth document of a generated world."""
    p = spec.params
    return {
        "seed": spec.seed,
        "spec": spec.to_dict(),
        "switches": {
            "endogenous": spec.endogenous,
            "heterogeneous": spec.heterogeneous,
            "state_dependence": spec.state_dependence,
            "nested": spec.nested,
        },
        "parameters": {
            "intercept": p.intercept,
            "alpha": p.alpha,
            "beta": {
                "roast_level": p.beta_roast_level,
                "organic": p.beta_organic,
                "pack_grams": p.beta_pack_grams,
            },
            "format_effects": dict(p.format_effects),
            "xi_sd": spec.xi_sd,
            "rho": p.rho if spec.endogenous else 0.0,
            "nu_sd": p.nu_sd,
            "taste_sd": p.taste_sd if spec.heterogeneous else 0.0,
            "gamma": p.gamma if spec.state_dependence else 0.0,
            "nest_sigma": spec.nest_sigma if spec.nested else 0.0,
            "promo_rate": p.promo_rate,
            "promo_depths": list(p.promo_depths),
            "bulk_rate": p.bulk_rate,
        },
        "formulas": {"utility": UTILITY_FORMULA, "price": PRICE_FORMULA},
        "units": {
            "price": "euros per pack (shelf_prices.shelf_price)",
            "pack_grams": "grams",
            "potential_units": "100 g of coffee per store-week",
            "choice": "one pack per buying visit; market = store x week",
        },
        "products": _products(spec, catalogue),
        "faults": faults,
        "line_counts": line_counts,
        "totals": totals,
    }


def _products(spec: WorldSpec, catalogue: Catalogue) -> list[dict[str, Any]]:
    prods = catalogue.products
    base = utility_without_price(spec.params, prods)
    out = []
    for j in range(prods.count):
        start, count = int(prods.sku_start[j]), int(prods.sku_count[j])
        target = prods.target_cents[j] / 100.0
        out.append(
            {
                "product": prods.key(j),
                "roaster": prods.roaster[j],
                "firm": prods.firm[j],
                "format": prods.format[j],
                "pack_grams": int(prods.pack_grams[j]),
                "roast_level": int(prods.roast_level[j]),
                "organic": int(prods.organic[j]),
                "skus": list(catalogue.item_codes[start : start + count]),
                "utility_without_price": round(float(base[j]), 10),
                "base_cost": round(target * (1 - spec.params.margin_share), 4),
                "markup": round(target * spec.params.margin_share, 4),
            }
        )
    return out
