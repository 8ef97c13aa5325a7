"""Chooser pseudonyms: a keyed hash of the loyalty-card id, and a holdout flag drawn from it.

chooser = first 32 hex digits of HMAC-SHA256(key, card). The key comes from the environment
variable named by choices.pseudonym_key_env, never from the config file, so a pseudonym cannot
be recomputed from the repository. The card -> chooser table lives only in the warehouse for
the length of the build and is never exported.
"""

from __future__ import annotations

import hashlib
import hmac
import os

import duckdb
import pyarrow as pa

from demandprep.errors import UserError

PSEUDONYM_HEX_DIGITS = 32
SHORT_KEY_BYTES = 16
BATCH_ROWS = 200_000
# the holdout draw reads 13 hex digits (52 bits) of a second keyed hash as a uniform number
HOLDOUT_HEX_DIGITS = 13
HOLDOUT_LABEL = b"holdout\x00"


def pseudonym_key(env_name: str) -> bytes:
    """The pseudonym key from the environment; a missing or empty key stops the build."""
    value = os.environ.get(env_name, "")
    if not value:
        raise UserError(
            f"environment variable {env_name} is not set; the choice build needs it as the key "
            "that pseudonymises loyalty-card ids.",
            f"export {env_name}=<a long random secret> (keep it out of the config and the "
            "repository), or set choices.enabled = false.",
        )
    return value.encode("utf-8")


def is_short_key(key: bytes) -> bool:
    """True when the key is shorter than 16 bytes (easier to guess)."""
    return len(key) < SHORT_KEY_BYTES


def chooser_pseudonym(key: bytes, card: str) -> str:
    """The chooser id of a card: truncated hex HMAC-SHA256(key, card)."""
    digest = hmac.new(key, card.encode("utf-8"), hashlib.sha256).hexdigest()
    return digest[:PSEUDONYM_HEX_DIGITS]


def holdout_draw(key: bytes, chooser: str) -> float:
    """A uniform number in [0, 1) fixed by the key and the chooser."""
    digest = hmac.new(key, HOLDOUT_LABEL + chooser.encode("ascii"), hashlib.sha256).hexdigest()
    return int(digest[:HOLDOUT_HEX_DIGITS], 16) / 16**HOLDOUT_HEX_DIGITS


def build_pseudonym_table(
    con: duckdb.DuckDBPyConnection, key: bytes, holdout_fraction: float
) -> int:
    """Write choice_pseudonyms(card, chooser, holdout) for every card of choice_visits."""
    con.execute(
        "create or replace table choice_pseudonyms (card varchar, chooser varchar, holdout boolean)"
    )
    # a second cursor streams the cards while the first one inserts
    reader = (
        con.cursor()
        .sql("select distinct card from choice_visits order by card")
        .to_arrow_reader(BATCH_ROWS)
    )
    cards = 0
    for batch in reader:
        mapped = _pseudonym_batch(batch.column(0).to_pylist(), key, holdout_fraction)
        con.register("choice_pseudonym_batch", mapped)
        con.execute("insert into choice_pseudonyms select * from choice_pseudonym_batch")
        con.unregister("choice_pseudonym_batch")
        cards += mapped.num_rows
    return cards


def _pseudonym_batch(cards: list[str], key: bytes, holdout_fraction: float) -> pa.Table:
    choosers = [chooser_pseudonym(key, card) for card in cards]
    holdout = [holdout_draw(key, chooser) < holdout_fraction for chooser in choosers]
    return pa.table(
        {
            "card": pa.array(cards, pa.string()),
            "chooser": pa.array(choosers, pa.string()),
            "holdout": pa.array(holdout, pa.bool_()),
        }
    )
