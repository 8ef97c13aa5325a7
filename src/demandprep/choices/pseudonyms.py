"""Keyed hashes of the choice build: chooser pseudonyms, occasion ids and the holdout flag.

chooser = first 32 hex digits of HMAC-SHA256(key, card); occasion (a card visit) = its day
(YYYY-MM-DD, so ids sort by day), ':' and the first 32 hex digits of HMAC-SHA256(key, "occasion"
NUL store NUL [day NUL] receipt; the day when receipt ids restart daily), computed in SQL from
the key's RFC 2104 pads. The label keeps the two kinds of hash apart, so an occasion id can never
equal a chooser id; both are stable across rebuilds with
the same key. The key comes from the environment variable named by choices.pseudonym_key_env, never
from the config file, so neither can be recomputed from the repository; a key shorter than 16 bytes
is refused. The card -> chooser table is a TEMP table: it dies with the build's connection, even
when the build does.
"""

from __future__ import annotations

import hashlib
import hmac
import os

import duckdb
import pyarrow as pa

from demandprep.errors import UserError

PSEUDONYM_HEX_DIGITS = 32
MIN_KEY_BYTES = 16
KEY_RECIPE = 'python -c "import secrets; print(secrets.token_hex(32))"'
# HMAC-SHA256 (RFC 2104): the key is padded to the hash's block and xor-ed with these bytes
HMAC_BLOCK_BYTES = 64
HMAC_INNER_BYTE = 0x36
HMAC_OUTER_BYTE = 0x5C
OCCASION_LABEL = b"occasion\x00"
BATCH_ROWS = 200_000
# the holdout draw reads 13 hex digits (52 bits) of a second keyed hash as a uniform number
HOLDOUT_HEX_DIGITS = 13
HOLDOUT_LABEL = b"holdout\x00"
FINGERPRINT_LABEL = b"key fingerprint\x00"


def pseudonym_key(env_name: str) -> bytes:
    """The pseudonym key from the environment; a missing or short key stops the build."""
    value = os.environ.get(env_name, "")
    if not value:
        raise UserError(
            f"environment variable {env_name} is not set; the choice build needs it as the key "
            "that pseudonymises loyalty-card ids.",
            f"export {env_name}=<a long random secret> (keep it out of the config and the "
            "repository), or set choices.enabled = false.",
        )
    if len(value.strip().encode("utf-8")) < MIN_KEY_BYTES:
        raise UserError(
            f"environment variable {env_name} holds a pseudonym key shorter than "
            f"{MIN_KEY_BYTES} bytes (spaces aside); anyone holding the card ids could then guess "
            "the key and recompute the pseudonyms.",
            f"set {env_name} to a long random secret, made for instance with {KEY_RECIPE}.",
        )
    if value != value.strip():
        raise UserError(
            f"environment variable {env_name} holds a pseudonym key with spaces or a line break "
            "at its start or end; they are part of the key, so a key set once with and once "
            "without them would change every chooser id.",
            f'set {env_name} without them (e.g. export {env_name}="$(cat keyfile)").',
        )
    return value.encode("utf-8")


def key_fingerprint(key: bytes) -> str:
    """16 hex digits that tell keys apart without telling anything of the key: a keyed hash of
    a fixed label (the manifest records it; a new key means new ids)."""
    return hmac.new(key, FINGERPRINT_LABEL, hashlib.sha256).hexdigest()[:16]


def configured_key_fingerprint(enabled: bool, env_name: str) -> str | None:
    """The fingerprint of the key a build with choices uses (None without choices)."""
    return key_fingerprint(pseudonym_key(env_name)) if enabled else None


def chooser_pseudonym(key: bytes, card: str) -> str:
    """The chooser id of a card: truncated hex HMAC-SHA256(key, card)."""
    digest = hmac.new(key, card.encode("utf-8"), hashlib.sha256).hexdigest()
    return digest[:PSEUDONYM_HEX_DIGITS]


def occasion_id(key: bytes, store: str, receipt: str, on: str, day_in_identity: bool = True) -> str:
    """The occasion id of a card visit, as the SQL of the choice build computes it.

    `on` is the visit's day (YYYY-MM-DD, of its first sale line), the id's sortable prefix; it
    is also part of the hashed identity when receipt ids restart every day (`day_in_identity`).
    """
    day_part = on.encode("utf-8") + b"\x00" if day_in_identity else b""
    message = OCCASION_LABEL + store.encode("utf-8") + b"\x00" + day_part + receipt.encode("utf-8")
    digest = hmac.new(key, message, hashlib.sha256).hexdigest()[:PSEUDONYM_HEX_DIGITS]
    return f"{on}:{digest}"


def occasion_hash_parameters(key: bytes) -> dict[str, bytes]:
    """Bound parameters with which SQL computes `occasion_id`: the key's HMAC pads and the label.

    HMAC(K, m) = H((K' xor opad) || H((K' xor ipad) || m)), K' = K zero-padded to the block
    (hashed first when longer) (RFC 2104); DuckDB's sha256 does the two hashes.
    """
    if len(key) > HMAC_BLOCK_BYTES:
        key = hashlib.sha256(key).digest()
    padded = key.ljust(HMAC_BLOCK_BYTES, b"\x00")
    return {
        "hmac_inner_pad": bytes(byte ^ HMAC_INNER_BYTE for byte in padded),
        "hmac_outer_pad": bytes(byte ^ HMAC_OUTER_BYTE for byte in padded),
        "occasion_label": OCCASION_LABEL,
    }


def holdout_draw(key: bytes, chooser: str) -> float:
    """A uniform number in [0, 1) fixed by the key and the chooser."""
    digest = hmac.new(key, HOLDOUT_LABEL + chooser.encode("ascii"), hashlib.sha256).hexdigest()
    return int(digest[:HOLDOUT_HEX_DIGITS], 16) / 16**HOLDOUT_HEX_DIGITS


def build_pseudonym_table(
    con: duckdb.DuckDBPyConnection, key: bytes, holdout_fraction: float, every_visit: bool
) -> int:
    """Write the TEMP table choice_pseudonyms(card, chooser, holdout) for the cards of
    `choice_scoped_visits` when it holds every visit, else for every card of a sale line (030
    takes the card of a visit the same way): the choosers table lists the kept visits'
    choosers too, and the kept visits hold no card.

    Temporary, so a build that dies leaves no card -> chooser map in the warehouse; every later
    stage runs on the same connection (the direct runner and the nightly flow both hold one).
    """
    con.execute(
        "create or replace temp table choice_pseudonyms "
        "(card varchar, chooser varchar, holdout boolean)"
    )
    # the cards in a working table the second cursor can see (raw_lines may be a TEMP view of
    # this connection: a chooser bucket's); it streams them while the first one inserts
    con.execute(CARDS_OF_VISITS if every_visit else CARDS_OF_SALE_LINES)
    reader = (
        con.cursor().sql("select card from choice_cards order by card").to_arrow_reader(BATCH_ROWS)
    )
    cards = 0
    for batch in reader:
        mapped = _pseudonym_batch(batch.column(0).to_pylist(), key, holdout_fraction)
        con.register("choice_pseudonym_batch", mapped)
        con.execute("insert into choice_pseudonyms select * from choice_pseudonym_batch")
        con.unregister("choice_pseudonym_batch")
        cards += mapped.num_rows
    reader.close()
    con.execute("drop table choice_cards")
    return cards


CARDS_OF_VISITS = """
create or replace table choice_cards as select distinct card from choice_scoped_visits
"""

CARDS_OF_SALE_LINES = """
create or replace table choice_cards as
select distinct card
from (
    select nullif(trim(cast(card as varchar)), '') as card from raw_lines where line_kind = 'sale'
)
where card is not null
"""


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
