"""Survey an open dataset with a multi-value column, carried by a package registry.

Dataset: ``zone1970.tab`` of the IANA time zone database, as shipped in the
PyPI package ``tzdata`` (package licence Apache-2.0; the tz database files
themselves are in the public domain, as the file's own header says). Written
against tzdata 2026.6 (IANA release 2026f); the file has been in the package
since at least 2024.1, the lower bound of the ``test`` extra in pyproject.toml.

Its first column is "the countries that overlap the timezone, as a
comma-separated list of ISO 3166 2-character country codes" (the file's
header): a delimited multi-value column. Lines starting with ``#`` are
comments; columns are separated by a single tab; the fourth column (comments)
is present only on some lines.

Every expected fact is computed here with plain Python from the file itself,
never hard-coded, so a newer tzdata release changes the data but not the test.
"""

import importlib.metadata
import importlib.resources
from collections import Counter

import pytest
import tzdata  # noqa: F401  (the `test` extra of pyproject.toml installs it)

from normalise.decode import decode
from normalise.read import read
from normalise.survey import survey


HEADER = ["countries", "coordinates", "tz", "comments"]


def zoneinfo_text(name: str) -> str:
    return (importlib.resources.files("tzdata") / "zoneinfo" / name).read_text(encoding="utf-8")


def table_rows(name: str) -> list[list[str]]:
    """Data lines of a tzdata .tab file split on tabs (reference: the file's own header)."""
    return [line.split("\t") for line in zoneinfo_text(name).splitlines()
            if line and not line.startswith("#")]


@pytest.fixture(scope="module")
def zone1970(tmp_path_factory):
    """zone1970.tab as a TSV with a header; returns (path, rows as split in the test)."""
    rows = table_rows("zone1970.tab")
    path = tmp_path_factory.mktemp("tzdata") / "zone1970.tsv"
    with open(path, "w", encoding="utf-8", newline="") as handle:
        handle.write("\t".join(HEADER) + "\n")
        for row in rows:
            # the comments column is absent on some lines: an empty cell here
            handle.write("\t".join(row + [""] * (len(HEADER) - len(row))) + "\n")
    return path, rows


def test_dataset_is_what_the_test_expects():
    # tzdata package (PyPI), Apache-2.0; zone1970.tab is public domain
    meta = importlib.metadata.metadata("tzdata")
    assert "Apache" in (meta.get("License-Expression") or meta.get("License") or "")
    assert "public domain" in zoneinfo_text("zone1970.tab")[:2000]
    rows = table_rows("zone1970.tab")
    assert len(rows) > 100
    assert all(len(row) in (3, 4) for row in rows)


def test_survey_of_zone1970(zone1970):
    # tzdata (PyPI, Apache-2.0; data public domain), written against 2026.6 / IANA 2026f
    path, rows = zone1970
    lists = [row[0].split(",") for row in rows]  # reference: the file's header, column 1
    lengths = [len(codes) for codes in lists]
    assert max(lengths) > 1  # it really is a multi-value column

    [entry] = survey([str(path)])["files"]
    assert entry["format"] == "tsv"
    assert entry["rows"] == len(rows)
    assert entry["records"] == len(rows) and entry["rejected_rows"] == 0
    assert entry["quarantined"] == 0
    columns = {c["name"]: c for c in entry["columns"]}
    assert list(columns) == HEADER

    countries = columns["countries"]
    assert countries["format"] == "delimited"
    assert countries["separator"] == ","
    assert countries["shape"] == "scalar-list"
    assert "ambiguous" not in countries  # no "Jr."-like pieces among country codes
    assert countries["fill_rate"] == 1.0
    assert countries["list_length"]["min"] == min(lengths)
    assert countries["list_length"]["max"] == max(lengths)
    assert countries["element_types"] == {"text": sum(lengths)}

    # the other columns are single values: coordinates and names have no
    # separator, and the comments are prose whose commas do not make lists
    for name in ("coordinates", "tz", "comments"):
        assert columns[name]["format"] == "text", name
    filled = sum(len(row) == 4 and row[3] != "" for row in rows)
    assert columns["comments"]["fill_rate"] == pytest.approx(filled / len(rows), abs=1e-4)


def test_decoded_country_codes(zone1970):
    # tzdata (PyPI, Apache-2.0; data public domain), written against 2026.6 / IANA 2026f
    path, rows = zone1970
    lists = [row[0].split(",") for row in rows]
    counts = Counter(code for codes in lists for code in codes)
    most_common_code, most_common_count = counts.most_common(1)[0]

    export = read(path)
    decoded = decode(export)["countries"]
    assert decoded.values == lists  # every row's list, in the file's order
    assert export.lines == list(range(2, len(rows) + 2))  # header = line 1
    decoded_counts = Counter(code for codes in decoded.values for code in codes)
    assert len(decoded_counts) == len(counts)  # distinct country codes
    assert decoded_counts.most_common(1)[0] == (most_common_code, most_common_count)

    # Cross-check against another file of the same package: every code is an
    # ISO 3166 alpha-2 code listed in iso3166.tab.
    iso = {row[0] for row in table_rows("iso3166.tab")}
    assert set(decoded_counts) <= iso
    assert all(len(code) == 2 and code.isupper() for code in decoded_counts)
