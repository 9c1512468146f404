"""The spec-key and column references are generated from the code (the spec schema and
the column table), printed by ``mpsobs reference``, and the README holds them verbatim
between its markers: a drift test."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest

from mpsobs import cli, workflow
from mpsobs.core.errors import InputError
from mpsobs.pipeline import build, columns, spec

README = Path(__file__).resolve().parents[1] / "README.md"


def test_readme_blocks_match_a_fresh_generation():
    text = README.read_text(encoding="utf-8")
    assert workflow.refresh_references(text) == text, (
        "README.md's generated blocks are out of date: rewrite them with "
        "mpsobs.workflow.refresh_references (or paste `mpsobs reference keys` / "
        "`mpsobs reference columns` between their markers)")


def test_a_schema_change_shows_as_drift(monkeypatch):
    text = README.read_text(encoding="utf-8")
    changed = tuple(replace(k, doc="a changed description") if k.path == "evolution.dt"
                    else k for k in spec.SCHEMA)
    monkeypatch.setattr(spec, "SCHEMA", changed)
    assert workflow.refresh_references(text) != text


def test_every_key_and_column_is_in_its_reference():
    keys = build.keys_reference()
    for key in spec.SCHEMA:
        assert f"| `{key.path}` |" in keys, key.path
    assert "'sample_strings'" in keys   # the estimators' registry, filled in by the builder
    table = columns.columns_markdown()
    for column in columns.RESULT_COLUMNS:
        assert f"| `{column.name}` |" in table, column.name
    for name in columns.PARAMETER_DESCRIPTIONS:
        assert f"| `{name}` |" in table, name


@pytest.mark.parametrize("topic", ["keys", "columns"])
def test_command_prints_the_reference(topic, capsys):
    assert cli.main(["reference", topic]) == 0
    assert capsys.readouterr().out == workflow.reference(topic)


def test_unknown_topic_and_missing_markers_are_input_errors(capsys):
    assert cli.main(["reference", "colours"]) == 2
    assert "TOPIC" in capsys.readouterr().err
    with pytest.raises(InputError, match="TOPIC"):
        workflow.reference("colours")
    with pytest.raises(InputError, match="generated: spec-keys"):
        workflow.refresh_references("# no markers\n")
