"""Fields as the CSV reader splits them equal Python's csv module's, quoting and all.

reference: Python's `csv` module (RFC 4180 quoting: a field in double quotes may hold the
delimiter and doubled quotes). Catalogue files of random text are written with `csv.writer`,
quoted as little as needed or everywhere, ingested, and the catalogue table compared with what
`csv.reader` reads back from the same bytes (spaces around a value trimmed, as the ingest does).
"""

from __future__ import annotations

import csv
import io

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from ingest_fixtures import copy_faults

from demandprep.config import load_config
from demandprep.ingest.runner import ingest_all
from demandprep.warehouse import open_warehouse

# field text on one line: any printable characters, the delimiter and quotes included
FIELD = st.text(
    alphabet=st.characters(blacklist_categories=("Cs", "Cc"), blacklist_characters="\r\n"),
    max_size=12,
)
HEADER = ["article", "label", "aisle", "maker", "grams"]


def catalogue_bytes(makers: list[str], quote_all: bool) -> bytes:
    """A catalogue of the fault fixture's dialect, one SKU per maker text, via csv.writer."""
    out = io.StringIO()
    quoting = csv.QUOTE_ALL if quote_all else csv.QUOTE_MINIMAL
    writer = csv.writer(out, delimiter=";", quoting=quoting, lineterminator="\n")
    writer.writerow(HEADER)
    for number, maker in enumerate(makers):
        # a letter first keeps the column text (a column of numbers would be typed as one)
        writer.writerow([f"K{number:03d}", "label", "coffee", "x" + maker, "250"])
    return out.getvalue().encode("utf-8")


def read_back(data: bytes) -> dict[str, str]:
    """sku -> maker as the csv module reads the bytes."""
    rows = list(csv.reader(io.StringIO(data.decode("utf-8")), delimiter=";"))
    return {row[0]: row[3] for row in rows[1:]}


@settings(
    max_examples=20,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.function_scoped_fixture],
)
@given(makers=st.lists(FIELD, min_size=1, max_size=8), quote_all=st.booleans())
def test_quoted_fields_split_as_the_csv_module_splits_them(
    tmp_path_factory, makers: list[str], quote_all: bool
) -> None:
    config_path = copy_faults(tmp_path_factory.mktemp("fields"))
    data = catalogue_bytes(makers, quote_all)
    (config_path.parent / "catalogue.csv").write_bytes(data)
    config = load_config(config_path)
    with open_warehouse(config.warehouse) as con:
        summary = ingest_all(con, config)
        catalogue = [r for r in summary.files if r.source == "catalogue"]
        assert [r.status for r in catalogue] == ["new"], catalogue
        rows = con.execute("select sku, firm from catalogue").fetchall()
    expected = read_back(data)
    got = {sku: firm for sku, firm in rows}
    # the ingest's one normalisation of reference text: spaces around a value are trimmed
    assert got == {sku: maker.rstrip(" ") for sku, maker in expected.items()}
