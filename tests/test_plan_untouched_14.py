"""Issue 14: the plan is made once (read, decode, infer, and the options that amend it), then every later pass —
build, check, write, report — reads it and never writes it.

The plan each build uses is captured where ``pipeline._open`` hands it on, with a deep copy taken at that moment;
after the whole build (both row paths, in memory and chunked, and a plan file replayed) the plan must still equal
its copy, field for field (dataclass equality, Python language reference, "dataclasses"). Its settings are a frozen
dataclass (``model.settings.Settings``): setting a field raises ``FrozenInstanceError``, and its mappings refuse to be
changed (``TypeError``).

Data: ``zone1970.tab`` of the IANA tz database (PyPI ``tzdata``; public domain) as a TSV with a delimited list, and
``countryinfo`` (PyPI, MIT) as a CSV with JSON lists and objects.
"""

from __future__ import annotations

import copy
import dataclasses

import pytest

from normalise import pipeline
from normalise.model.settings import Settings
from normalise.pipeline import build_database, make_plan, prepare
from tests.test_report_from_plan_14 import _countries_csv, _zone_tsv


@pytest.fixture(params=["tzdata", "countryinfo"])
def export(request, tmp_path):
    return _zone_tsv(tmp_path) if request.param == "tzdata" else _countries_csv(tmp_path)


@pytest.fixture
def captured(monkeypatch):
    seen = []
    opened = pipeline._open

    def _open(*args, **kwargs):
        plan, inputs = opened(*args, **kwargs)
        seen.append((plan, copy.deepcopy(plan)))
        return plan, inputs

    monkeypatch.setattr(pipeline, "_open", _open)
    return seen


@pytest.mark.parametrize("chunk_rows", [None, 7])
def test_build_leaves_the_plan_as_made(export, captured, tmp_path, chunk_rows):
    out = tmp_path / "out"
    out.mkdir()
    build_database([export], str(out / "db.sqlite"), chunk_rows=chunk_rows, report_path=str(out / "r.html"),
                   dictionary_path=str(out / "d.md"), parquet_dir=str(out / "parquet"))
    assert len(captured) == 1
    plan, as_made = captured[0]
    assert plan == as_made


def test_a_replayed_plan_is_left_as_read(export, captured, tmp_path):
    plan_file = tmp_path / "plan.toml"
    make_plan([export], str(plan_file))
    captured.clear()
    build_database([export], str(tmp_path / "db.sqlite"), plan_path=str(plan_file))
    plan, as_made = captured[0]
    assert plan == as_made


def test_settings_cannot_be_changed():
    settings = Settings(natural_keys={"people": "id"})
    with pytest.raises(dataclasses.FrozenInstanceError):
        settings.duplicates = "last"
    with pytest.raises(TypeError):
        settings.natural_keys["people"] = "other"


def test_the_plan_holds_the_limits_it_was_made_with(tmp_path):
    """Limits are a setting of the run like the others: given as ``limits=`` or inside ``Settings``, the plan says
    which bounded its cells, and a cell beyond them is quarantined (RFC 8259 section 9 lets a parser limit depth)."""
    from normalise import Limits, Settings

    path = tmp_path / "t.csv"
    path.write_text('id,tree\n1,"[[[1]]]"\n2,"[1]"\n', encoding="utf-8")
    assert prepare([str(path)], limits=Limits(max_depth=2)).plan.settings.limits == Limits(max_depth=2)
    assert prepare([str(path)]).plan.settings.limits == Limits()
    built = build_database([str(path)], str(tmp_path / "t.db"), options=Settings(limits=Limits(max_depth=2)))
    assert built["cells_quarantined"] == 1
