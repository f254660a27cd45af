"""Reading and writing the XML model format; hostile XML refused cleanly."""

from __future__ import annotations

import dataclasses
import math
import random
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from lxml import etree
from model_strategies import models

from troubleshoot.model.demos import DEMOS, demo_path
from troubleshoot.errors import ModelError
from troubleshoot.model import BasicEvent, Gate, Model, exponential_probability
from troubleshoot.model.xmlfile import (
    load_model,
    load_model_with_warnings,
    model_schema,
    save_model,
    schema_path,
)
from troubleshoot.model.validate import validate_model
from troubleshoot.model.xmlsafe import parse_xml_file

BAD = Path(__file__).parent / "bad_models"


def problems_of(path) -> list:
    with pytest.raises(ModelError) as caught:
        load_model(path)
    return caught.value.problems


# -- round trip ---------------------------------------------------------------


@pytest.mark.parametrize("demo", sorted(DEMOS))
def test_demo_round_trip_gives_an_equal_model(demo, tmp_path):
    original = load_model(demo_path(demo))
    copy_path = tmp_path / "copy.xml"
    save_model(original, copy_path)
    again = load_model(copy_path)
    assert again == original
    # Writing the copy again gives the same bytes: the writer is deterministic.
    second = tmp_path / "second.xml"
    save_model(again, second)
    assert second.read_bytes() == copy_path.read_bytes()


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(model=models())
def test_random_models_round_trip(model, tmp_path):
    assert validate_model(model) == []
    path = tmp_path / "random.xml"
    save_model(model, path)
    loaded, warnings = load_model_with_warnings(path)
    assert warnings == []
    assert loaded == model


def test_floats_written_with_repr_read_back_exactly(tmp_path):
    awkward = 0.1 + 0.2  # 0.30000000000000004: str() of older Pythons lost the last digit
    model = Model(
        name="floats",
        top="e",
        gates=(),
        basic_events=(BasicEvent("e", "Part failed", awkward),),
        isolation_threshold=1 / 3,
    )
    save_model(model, tmp_path / "m.xml")
    loaded = load_model(tmp_path / "m.xml")
    assert loaded.basic_events[0].probability == awkward
    assert loaded.isolation_threshold == 1 / 3


def test_rate_and_exposure_are_written_and_probability_derived(tmp_path):
    rate, exposure = 2e-6, 8760.0
    event = BasicEvent("e", "Pump failed", exponential_probability(rate, exposure), rate=rate, exposure=exposure)
    model = Model(name="rates", top="g", gates=(Gate("g", "Top", "or", ("e",)),), basic_events=(event,))
    path = tmp_path / "m.xml"
    save_model(model, path)
    root = etree.parse(str(path)).getroot()
    element = root.find("fault-tree/basic-event")
    assert element.find("probability") is None
    assert element.find("failure-rate").get("per-hour") == repr(rate)
    assert load_model(path).basic_events[0].probability == event.probability


def test_loaded_model_is_immutable_and_knows_its_source_and_lines():
    path = demo_path("rooftop")
    model = load_model(path)
    assert model.source == str(path)
    with pytest.raises(dataclasses.FrozenInstanceError):
        model.name = "changed"
    lines = path.read_text(encoding="utf-8").splitlines()
    for element in model.gates + model.basic_events + model.checks + model.symptoms:
        assert element.line is not None
        assert f'id="{element.id}"' in lines[element.line - 1]


def test_indented_text_is_read_without_the_file_indentation(tmp_path):
    text = (BAD / "minimal_valid.xml").read_text(encoding="utf-8").replace(
        "<label>Look at A</label>",
        "<label>Look at A</label>\n      <instructions>\n        Step one.\n        Step two.\n      </instructions>",
    )
    path = tmp_path / "m.xml"
    path.write_text(text, encoding="utf-8")
    assert load_model(path).checks[0].instructions == "Step one.\nStep two."


def test_save_refuses_an_invalid_model_and_writes_nothing(tmp_path):
    model = Model(name="bad", top="missing", gates=(), basic_events=(BasicEvent("e", "x", 2.0),))
    path = tmp_path / "m.xml"
    with pytest.raises(ModelError) as caught:
        save_model(model, path)
    assert not path.exists()
    messages = " ".join(p.message for p in caught.value.problems)
    assert "missing" in messages and "outside [0, 1]" in messages


def test_save_refuses_text_xml_cannot_carry(tmp_path):
    model = Model(name="bell\x07", top="e", gates=(), basic_events=(BasicEvent("e", "x", 0.1),))
    with pytest.raises(ModelError):
        save_model(model, tmp_path / "m.xml")
    assert list(tmp_path.iterdir()) == []  # no temporary file left behind


# -- the exponential failure law -------------------------------------------------


@pytest.mark.parametrize(
    "rate, hours, expected",
    [
        # p = 1 - exp(-lambda t): NUREG-0492 chapter VI (exponential failure law);
        # the expected values are exp() evaluated independently of expm1.
        (1e-4, 1000.0, 1.0 - math.exp(-0.1)),  # 0.0951625819640404
        (1e-3, 1000.0, 1.0 - math.exp(-1.0)),  # 0.632...: 63 % fail by the mean life (common practice)
        (5e-6, 8760.0, 1.0 - math.exp(-0.0438)),
        (0.0, 1000.0, 0.0),
    ],
)
def test_exponential_failure_probability(rate, hours, expected, tmp_path):
    assert exponential_probability(rate, hours) == pytest.approx(expected, rel=1e-12, abs=1e-15)
    text = (BAD / "minimal_valid.xml").read_text(encoding="utf-8").replace(
        "<probability>0.2</probability>", f'<failure-rate per-hour="{rate!r}" exposure-hours="{hours!r}"/>'
    )
    path = tmp_path / "m.xml"
    path.write_text(text, encoding="utf-8")
    assert load_model(path).event_by_id["b"].probability == pytest.approx(expected, rel=1e-12, abs=1e-15)


def test_rare_event_approximation_keeps_its_digits():
    # For lambda t << 1, p = lambda t (1 - lambda t / 2 + ...): NUREG-0492 chapter VI, rare-event approximation.
    rate, hours = 1e-9, 1.0
    assert exponential_probability(rate, hours) == pytest.approx(1e-9 * (1 - 0.5e-9), rel=1e-15)


# -- the schema -----------------------------------------------------------------


@pytest.mark.parametrize("demo", sorted(DEMOS))
def test_demo_files_are_valid_against_the_shipped_schema(demo):
    schema = etree.XMLSchema(etree.parse(str(schema_path())))
    schema.assertValid(etree.parse(str(demo_path(demo))))
    assert model_schema().validate(etree.parse(str(demo_path(demo))))


# -- hostile and broken XML -----------------------------------------------------


def test_external_entity_is_refused_and_the_file_is_not_read(tmp_path):
    secret = tmp_path / "secret.txt"
    secret.write_text("TOP-SECRET-CONTENT", encoding="utf-8")
    hostile = tmp_path / "hostile.xml"
    hostile.write_text(
        (BAD / "external_entity.xml").read_text(encoding="utf-8").replace("file:///etc/passwd", secret.as_uri()),
        encoding="utf-8",
    )
    problems = problems_of(hostile)
    assert len(problems) == 1 and problems[0].line == 2
    assert "entities" in problems[0].message
    assert "TOP-SECRET" not in str(problems)


def test_billion_laughs_is_refused():
    problems = problems_of(BAD / "billion_laughs.xml")
    assert problems[0].line == 2 and "entit" in problems[0].message


def test_entity_from_an_external_dtd_is_refused(tmp_path):
    (tmp_path / "local.dtd").write_text('<!ENTITY secret "SECRET">\n', encoding="utf-8")
    path = tmp_path / "m.xml"
    path.write_text(
        '<?xml version="1.0"?>\n<!DOCTYPE r SYSTEM "local.dtd">\n<r>\n  <a>&secret;</a>\n</r>\n', encoding="utf-8"
    )
    with pytest.raises(ModelError) as caught:
        parse_xml_file(path)
    # Issue 17: any DOCTYPE naming an external DTD is refused at its own line, before parsing.
    assert caught.value.problems[0].line == 2
    assert "external DTD" in caught.value.problems[0].message and "local.dtd" in caught.value.problems[0].message
    assert "SECRET" not in caught.value.problems[0].message


def test_network_dtd_is_never_fetched(tmp_path):
    path = tmp_path / "m.xml"
    path.write_text(
        '<?xml version="1.0"?>\n<!DOCTYPE r SYSTEM "http://example.invalid/model.dtd">\n<r/>\n', encoding="utf-8"
    )
    problems = problems_of(path)
    assert problems[0].line == 2 and "network" in problems[0].message


def test_file_over_the_size_limit_is_refused_before_reading(tmp_path):
    path = tmp_path / "huge.xml"
    with open(path, "wb") as handle:
        handle.write(b'<?xml version="1.0"?>\n<troubleshooting-model format-version="1.0">\n')
        chunk = b"<!-- padding padding padding padding padding padding padding padding -->\n" * 14000
        while handle.tell() < 50 * 1024 * 1024:
            handle.write(chunk)
        handle.write(b"</troubleshooting-model>\n")
    problems = problems_of(path)
    assert "limit" in problems[0].message and "MB" in problems[0].message


def test_size_limit_is_a_parameter(tmp_path):
    path = tmp_path / "m.xml"
    path.write_bytes(b"<r>" + b"x" * 2000 + b"</r>")
    assert parse_xml_file(path).tag == "r"
    with pytest.raises(ModelError, match="limit"):
        parse_xml_file(path, max_bytes=1000)


def test_binary_junk_is_refused(tmp_path):
    path = tmp_path / "junk.xml"
    path.write_bytes(bytes(random.Random(7).randrange(256) for _ in range(4096)))
    problems = problems_of(path)
    assert len(problems) == 1 and problems[0].line in (1, None)


@pytest.mark.parametrize(
    "name, line, words",
    [
        ("not_xml.xml", 1, "not an XML file"),
        ("empty.xml", None, "empty"),
        ("truncated.xml", 20, "cut short"),
        ("truncated_tag.xml", 20, "cut short"),
        ("wrong_root.xml", 2, "<troubleshooting-model"),
        ("wrong_version.xml", 2, "not supported"),
    ],
)
def test_broken_files_give_one_clear_problem(name, line, words):
    problems = problems_of(BAD / name)
    assert len(problems) == 1
    assert problems[0].line == line
    assert words in problems[0].message
    assert problems[0].path == str(BAD / name)


def test_missing_file_and_folder(tmp_path):
    assert "not found" in problems_of(tmp_path / "nowhere.xml")[0].message
    assert "folder" in problems_of(tmp_path)[0].message


def test_utf16_file_is_read(tmp_path):
    text = (BAD / "minimal_valid.xml").read_text(encoding="utf-8").replace('encoding="UTF-8"', 'encoding="UTF-16"')
    path = tmp_path / "m.xml"
    path.write_bytes(text.encode("utf-16"))
    assert load_model(path).name == "Small test model"
