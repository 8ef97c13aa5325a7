"""What `check` finds before a long run: every problem at once, each a one-line UserError.

It reads only the header of the first file of each source (and the catalogue's category
column), on an in-memory DuckDB connection, so it never touches the warehouse:

1. each source's header against its column mapping, and its delimiter (a header that splits
   into one column while another delimiter would split it);
2. every column a build stage reads by its role (product keys, geography, population,
   instruments, demographics, cost shifters) against the mapping of the source it comes from
   (market-only roles only when the market build runs);
3. `markets.categories` against the values of the catalogue's category column;
4. the pseudonym key in the environment when choices are built.
"""

from __future__ import annotations

import csv
from collections.abc import Iterator
from pathlib import Path

import duckdb

from demandprep.choices.pseudonyms import pseudonym_key
from demandprep.config import FileSource, ProjectConfig
from demandprep.errors import UserError
from demandprep.ingest.lines import LinesUnreadable, line_chunks
from demandprep.ingest.reader import (
    SourceColumn,
    csv_parameters,
    file_columns,
    map_column,
    refuse_stage_names,
)
from demandprep.sqlfiles import quote_identifier

DELIMITERS = (",", ";", "\t", "|")
CATEGORY_OPTIONS = (
    "delim = $delimiter, header = $header, encoding = $encoding, all_varchar = true, "
    "ignore_errors = true"
)
SHOWN_VALUES = 10

# (config key, our column name, source that must map it) for one configured role
Role = tuple[str, str, str]


def preflight_problems(config: ProjectConfig) -> list[UserError]:
    """Every problem `check` can find without running the build, in a stable order."""
    with duckdb.connect() as con:
        headers = {name: source_header(con, name, source) for name, source in _sources(config)}
        problems = [problem for _, found in headers.values() for problem in found]
        problems += role_problems(config)
        catalogue = headers.get("catalogue")
        if catalogue is not None and "category" in catalogue[0]:
            problems += category_problems(con, config, catalogue[0]["category"])
    problems += key_problems(config)
    return problems


def _sources(config: ProjectConfig) -> Iterator[tuple[str, FileSource]]:
    for name, source in config.sources:
        if source is not None and source.resolved_files():
            yield name, source


def source_header(
    con: duckdb.DuckDBPyConnection, name: str, source: FileSource
) -> tuple[dict[str, str], list[UserError]]:
    """The mapped columns of a source's first file (ours -> the file's), and what is wrong."""
    first = source.resolved_files()[0]
    try:
        columns = file_columns(con, first, source)
    except Exception as error:  # noqa: BLE001 - any failure to read the header is one problem
        return {}, [_as_problem(error)]
    columns = _names_as_written(first, source, columns)
    other = _other_delimiter(con, first, source, len(columns))
    if other is not None:
        hint = f"set delimiter = {_toml_string(other)} under [sources.{name}]."
        message = f"{first}: the header has one column; the file seems to use {other!r}."
        return {}, [UserError(message, hint)]
    mapped, problems = {}, []
    for ours in source.columns:
        try:
            mapped[ours] = map_column(first, columns, source.columns, ours, source.header)
        except UserError as error:
            problems.append(error)
    try:
        refuse_stage_names(first, source, columns, mapped)
    except UserError as error:
        problems.append(error)
    return {ours: column.name for ours, column in mapped.items()}, problems


def _names_as_written(
    path: Path, source: FileSource, columns: tuple[SourceColumn, ...]
) -> tuple[SourceColumn, ...]:
    """A CSV header's names as the file writes them: DuckDB's describe renames a repeated name
    ('qty', 'qty_1'), which would hide that a mapped column is named twice (map_columns)."""
    if source.format != "csv" or not source.header:
        return columns
    try:
        first = next(line_chunks(path, source.encoding), None)
    except LinesUnreadable:
        return columns  # the ingest says why, with the file's line
    text = None if first is None or first.num_rows == 0 else first["text"][0].as_py()
    if text is None:
        return columns
    names = next(csv.reader([text.rstrip("\r\n")], delimiter=source.delimiter), [])
    if len(names) != len(columns):
        return columns
    return tuple(
        SourceColumn(name, column.type) for name, column in zip(names, columns, strict=True)
    )


def _other_delimiter(
    con: duckdb.DuckDBPyConnection, path: Path, source: FileSource, column_count: int
) -> str | None:
    if source.format != "csv" or column_count != 1 or len(source.columns) < 2:
        return None
    for delimiter in DELIMITERS:
        if delimiter == source.delimiter:
            continue
        trial = source.model_copy(update={"delimiter": delimiter})
        try:
            if len(file_columns(con, path, trial)) > 1:
                return delimiter
        except Exception:  # noqa: BLE001, S112 - a delimiter that cannot read it is not the one
            continue
    return None


def role_problems(config: ProjectConfig) -> list[UserError]:
    """Every column a stage reads by role that its source's mapping does not provide."""
    problems = []
    for key, name, source_name in configured_roles(config):
        source = getattr(config.sources, source_name)
        if source is None:
            problems.append(
                UserError(
                    f"config key {key!r} names {name!r} but there is no [sources.{source_name}] "
                    "section.",
                    f"configure [sources.{source_name}] or remove it from {key}.",
                )
            )
        elif name not in source.columns:
            problems.append(
                UserError(
                    f"config key {key!r} names {name!r}, which sources.{source_name}.columns "
                    f"does not map (it maps {', '.join(source.columns)}).",
                    f"map it under [sources.{source_name}.columns] or remove it from {key}.",
                )
            )
    if config.market_build_enabled:
        problems += _instrument_characteristic_problems(config)
    return problems


def configured_roles(config: ProjectConfig) -> list[Role]:
    """(config key, column, source) for every mapped column the build reads by its role."""
    products = config.products
    roles: list[Role] = [("products.keys", name, "catalogue") for name in products.keys]
    roles.append(("products.firm", products.firm, "catalogue"))
    if products.nest is not None:
        roles.append(("products.nest", products.nest, "catalogue"))
    roles += [("products.characteristics", n, "catalogue") for n in products.characteristics]
    if config.market_build_enabled:
        roles += _market_roles(config)
    drawn = config.market_build_enabled and config.demographic_draws.draws is not None
    if config.choices.enabled or drawn:
        roles += [("choices.demographics", n, "households") for n in config.choices.demographics]
    return list(dict.fromkeys(roles))


def _market_roles(config: ProjectConfig) -> list[Role]:
    # columns only the market and instrument stages read
    roles: list[Role] = []
    unit = config.products.equivalent_unit
    if unit.kind == "weight":
        roles.append(("products.equivalent_unit.size_column", unit.size_column, "catalogue"))
        roles.append(("products.equivalent_unit.unit_column", unit.unit_column, "catalogue"))
    roles += _store_roles(config)
    shifters = config.instruments.cost_shifters
    if shifters is not None:
        roles += [
            ("instruments.cost_shifters.columns", n, "cost_shifters") for n in shifters.columns
        ]
        roles += [
            ("instruments.cost_shifters.join_on", n, "cost_shifters") for n in shifters.join_on
        ]
    return roles


def _store_roles(config: ProjectConfig) -> list[Role]:
    # `store` itself is always mapped (the config requires it)
    roles: list[Role] = []
    if config.markets.geography != "store":
        roles.append(("markets.geography", config.markets.geography, "stores"))
    for name, assumption in config.market_size.items():
        if assumption.method == "population":
            key = f"market_size.{name}.population_column"
            roles.append((key, assumption.population_column, "stores"))
    hausman = config.instruments.hausman
    if hausman.enabled and hausman.exclude_same not in (None, "store"):
        roles.append(("instruments.hausman.exclude_same", str(hausman.exclude_same), "stores"))
    return roles


def _instrument_characteristic_problems(config: ProjectConfig) -> list[UserError]:
    # instruments read characteristics from the share table, which carries only these
    carried = config.products.characteristics
    instruments = config.instruments
    keys = {
        "instruments.characteristic_sums": instruments.characteristic_sums,
        "instruments.differentiation": instruments.differentiation,
    }
    return [
        UserError(
            f"config key {key!r} names {name!r}, which products.characteristics does not list.",
            "list it in products.characteristics so the market build carries it.",
        )
        for key, names in keys.items()
        for name in names
        if name not in carried
    ]


def category_problems(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, column: str
) -> list[UserError]:
    """Each configured category that no catalogue file holds in its category column."""
    source = config.sources.catalogue
    files = source.resolved_files()
    found = catalogue_categories(con, source, files, column)
    where = str(files[0]) if len(files) == 1 else f"the {len(files)} catalogue files"
    shown = ", ".join(found[:SHOWN_VALUES]) + (", ..." if len(found) > SHOWN_VALUES else "")
    return [
        UserError(
            f"config key 'markets.categories': {category!r} does not occur in column "
            f"{column!r} of {where} (it has {shown or 'no values'}).",
            "list categories exactly as the catalogue spells them.",
        )
        for category in config.markets.categories
        if category not in found
    ]


def catalogue_categories(
    con: duckdb.DuckDBPyConnection, source: FileSource, files: list[Path], column: str
) -> list[str]:
    """The distinct values of the category column over every catalogue file, sorted."""
    paths = [str(path) for path in files]
    selected = f"select distinct cast({quote_identifier(column)} as varchar) as value"
    if source.format == "parquet":
        sql, params = f"{selected} from read_parquet($paths)", {"paths": paths}  # noqa: S608
    else:
        params = csv_parameters(paths, source)
        sql = f"{selected} from read_csv($paths, {CATEGORY_OPTIONS})"  # noqa: S608
    try:
        query = f"select value from ({sql}) where value is not null order by value"  # noqa: S608
        rows = con.execute(query, params).fetchall()
    except duckdb.Error:
        return []  # unreadable: the header check has said so already
    return [row[0] for row in rows]


def key_problems(config: ProjectConfig) -> list[UserError]:
    """The pseudonym key the choice build needs: set, and at least 16 bytes long."""
    if not config.choices.enabled:
        return []
    try:
        pseudonym_key(config.choices.pseudonym_key_env)  # refuses a missing or short key
    except UserError as error:
        return [error]
    return []


def _as_problem(error: Exception) -> UserError:
    if isinstance(error, UserError):
        return error
    message, _, hint = " ".join(str(error).split()).partition(" Hint: ")
    return UserError(message, hint or "check that the file is a readable table.")


def _toml_string(text: str) -> str:
    return '"\\t"' if text == "\t" else f'"{text}"'
