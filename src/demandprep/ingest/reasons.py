"""Why a line was quarantined: one short code per rule, each with a one-line description.

The codes are the values of `quarantine.reason` and `ledger_reasons.reason`; the descriptions
feed the data dictionary and the build report. `quarantine.detail` names the field and the
problem ("quantity: not a number"); it quotes the value as written only for sources without card
ids (demandprep.personal): receipts when no `card` column is mapped and the reference sources
but households. A card id can sit in any field of a broken line, so no value of a card-bearing
source is quoted.
"""

from __future__ import annotations

WRONG_COLUMN_COUNT = "wrong_column_count"
UNPARSEABLE_FIELD = "unparseable_field"
MISSING_REQUIRED_FIELD = "missing_required_field"
UNKNOWN_LINE_KIND = "unknown_line_kind"
TIMESTAMP_OUT_OF_RANGE = "timestamp_out_of_range"
NON_POSITIVE_QUANTITY = "non_positive_quantity"
NEGATIVE_AMOUNT = "negative_amount"
RETURN_NOT_NEGATIVE = "return_not_negative"
UNKNOWN_STORE = "unknown_store"
UNKNOWN_SKU = "unknown_sku"
DUPLICATE_LINE = "duplicate_line"
DUPLICATE_KEY = "duplicate_key"
NON_POSITIVE_VALUE = "non_positive_value"
UNKNOWN_TIMEZONE = "unknown_timezone"
UNCLOSED_QUOTE = "unclosed_quote"
STRAY_CARRIAGE_RETURN = "stray_carriage_return"
LINE_TOO_LONG = "line_too_long"
VALUE_OUT_OF_RANGE = "value_out_of_range"

REASONS: dict[str, str] = {
    WRONG_COLUMN_COUNT: "the line has more or fewer fields than the header (empty trailing "
    "fields count)",
    UNPARSEABLE_FIELD: "a field cannot be read as its type (number, timestamp, date, flag), "
    "the line is not valid text in the configured encoding, or a quoted field has text after "
    "its closing quote",
    MISSING_REQUIRED_FIELD: "a required field is empty",
    UNKNOWN_LINE_KIND: "the line kind is not one of sale, return, void",
    TIMESTAMP_OUT_OF_RANGE: "the sale time falls outside sources.receipts.valid_from/valid_to",
    NON_POSITIVE_QUANTITY: "a sale with a quantity of zero or less",
    NEGATIVE_AMOUNT: "a sale with a negative amount",
    RETURN_NOT_NEGATIVE: "a return whose quantity is not negative or whose amount is positive",
    UNKNOWN_STORE: "the store is not in the stores table",
    UNKNOWN_SKU: "the SKU is not in the catalogue",
    DUPLICATE_LINE: "the same store, day, receipt and line was already accepted "
    "(earlier in this file or from another file)",
    DUPLICATE_KEY: "a reference row whose key was already accepted (earlier in this file "
    "or from another file of the same source)",
    NON_POSITIVE_VALUE: "a shelf price or market size of zero or less",
    UNKNOWN_TIMEZONE: "a store timezone that is not a known IANA zone name",
    UNCLOSED_QUOTE: "a quoted field is not closed before the end of its line (fields may not "
    "span lines)",
    STRAY_CARRIAGE_RETURN: "a carriage return (CR) inside the line, not just before its line "
    "feed (a line ends at LF; CRLF is one terminator)",
    LINE_TOO_LONG: "the line is longer than the reader's limit of 1 MiB; its first 4 KiB are "
    "kept as its original text",
    VALUE_OUT_OF_RANGE: "a quantity, amount or discount larger (in absolute value) than "
    "sources.receipts.max_quantity / max_amount, or than the build's exact decimal type holds "
    "(12 whole digits)",
}


def describe_reason(reason: str) -> str:
    """The one-line description of a quarantine reason code."""
    return REASONS[reason]
