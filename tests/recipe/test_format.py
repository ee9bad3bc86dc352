"""The formats described once: the JSON Schemas `ccbench schema` prints are the committed ones,
the reference page is the schemas' own, a general JSON Schema validator (jsonschema, Draft
2020-12) takes every shipped file and refuses broken ones, and the loader reads through the
same models (a misspelt key anywhere gets the nearest known key)."""

from __future__ import annotations

import dataclasses
import io
import subprocess
import sys
from pathlib import Path

import pytest
import yaml
from jsonschema import Draft202012Validator
from rich.console import Console

from instruments import chamber_dialect, dialect
from instruments.dialectformat import ChamberDialect, SmuDialect
from sequencer.cli import schemacmd
from sequencer.cli.main import main
from sequencer.model.errors import RecipeError
from sequencer.recipe.format import reference
from sequencer.recipe.format.schema import KINDS, schema
from sequencer.recipe.load import load_recipe, load_station

ROOT = Path(__file__).resolve().parents[2]
SHIPPED = {
    "recipe": ["recipes/demo.yaml", "recipes/demo-production.yaml"],
    "station": ["recipes/demo-station.yaml"],
    "dialect": sorted(
        str(p.relative_to(ROOT)) for p in (ROOT / "instruments/dialects").glob("*.yaml")
    ),
}
DEMO = (ROOT / "recipes/demo.yaml").read_text(encoding="utf-8")
STATION = (ROOT / "recipes/demo-station.yaml").read_text(encoding="utf-8")


def _printed(kind: str) -> str:
    out = io.StringIO()
    assert main(["schema", kind], console=Console(file=out)) == 0
    return out.getvalue()


@pytest.mark.parametrize("kind", KINDS)
def test_the_committed_schema_is_what_the_command_prints(kind):
    committed = (ROOT / "docs/schema" / f"{kind}.schema.json").read_text(encoding="utf-8")
    assert _printed(kind) == committed, "run python -m sequencer.recipe.format.reference"


@pytest.mark.parametrize("kind", KINDS)
def test_the_schema_is_draft_2020_12_with_its_id_and_title(kind):
    body = schema(kind)
    Draft202012Validator.check_schema(body)
    assert body["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert body["$id"] and body["title"]


def test_the_command_and_the_format_offer_the_same_kinds():
    assert schemacmd.KINDS == KINDS


def test_the_reference_page_is_the_schemas_own():
    page = (ROOT / reference.PAGE).read_text(encoding="utf-8")
    assert page == reference.page(), "run python -m sequencer.recipe.format.reference"


def _keys(node, defs, seen=()):
    """Every property name below a schema node (through $ref, anyOf, items)."""
    if isinstance(node, dict):
        if "$ref" in node:
            name = node["$ref"].rsplit("/", 1)[-1]
            if name not in seen:
                yield from _keys(defs[name], defs, (*seen, name))
            return
        for key, value in node.get("properties", {}).items():
            yield key
            yield from _keys(value, defs, seen)
        for word in ("anyOf", "oneOf", "items"):
            yield from _keys(node.get(word), defs, seen)
    elif isinstance(node, list):
        for item in node:
            yield from _keys(item, defs, seen)


@pytest.mark.parametrize("kind", KINDS)
def test_every_key_of_the_schema_has_a_row_with_its_meaning(kind):
    body = schema(kind)
    rows = [line.split(" | ") for line in reference.page().splitlines() if line.startswith("| ")]
    listed = {row[0].lstrip("| ").split(".")[-1].removesuffix("[]") for row in rows}
    assert set(_keys(body, body.get("$defs", {}))) <= listed
    assert all(row[4].strip(" |") for row in rows[1:] if row[0] != "| key"), "a key has no meaning"


@pytest.mark.parametrize(("kind", "path"), [(k, p) for k, ps in SHIPPED.items() for p in ps])
def test_every_shipped_file_validates_and_names_its_schema(kind, path):
    text = (ROOT / path).read_text(encoding="utf-8")
    first = text.splitlines()[0]
    assert first.startswith("# yaml-language-server: $schema=")
    named = (ROOT / path).parent / first.split("$schema=", 1)[1]
    assert named.resolve() == (ROOT / "docs/schema" / f"{kind}.schema.json").resolve()
    errors = list(Draft202012Validator(schema(kind)).iter_errors(yaml.safe_load(text)))
    assert errors == []


BROKEN_RECIPES = [
    ("complance: 5 mA", "compliance: 5 mA", "an unknown (misspelt) key"),
    ("points: 81", "points: 81", "a wrong type"),
    ("lot: FK2611-07\n", "", "a missing required key"),
    ("decision: strict", "decision: guarded", "a value outside its choices"),
    ("repeats: many", "repeats: 5", "text where a whole number goes"),
]


@pytest.mark.parametrize(("new", "old", "what"), BROKEN_RECIPES)
def test_a_broken_recipe_is_refused_by_the_schema_and_the_loader(tmp_path, new, old, what):
    text = DEMO.replace(old, new, 1) if old else DEMO
    if what == "a wrong type":
        text = DEMO.replace("stop: 40 V", "stop: 40", 1)
    if what == "a missing required key":
        text = DEMO.replace("lot: FK2611-07\n", "", 1)
    assert text != DEMO
    assert list(Draft202012Validator(schema("recipe")).iter_errors(yaml.safe_load(text))), what
    (tmp_path / "demo-station.yaml").write_text(STATION)
    path = tmp_path / "r.yaml"
    path.write_text(text)
    with pytest.raises(RecipeError) as caught:
        load_recipe(path)
    assert str(caught.value).startswith(f"{path}:") and "\n" not in str(caught.value)


def test_the_shipped_broken_recipe_is_refused_by_the_schema():
    data = yaml.safe_load((ROOT / "recipes/broken.yaml").read_text(encoding="utf-8"))
    errors = list(Draft202012Validator(schema("recipe")).iter_errors(data))
    # at the value itself, as an editor marks it (not "step 0 matches no kind of step")
    assert [list(e.absolute_path) for e in errors] == [["steps", 0, "sweep", "stop"]]


@pytest.mark.parametrize(
    ("change", "kind"),
    [
        (("max_power: 250 mW", "max_powr: 250 mW"), "station"),
        (("interlocked: true", "interlocked: 1"), "station"),
        (("station: FLC-bench-B2\n", ""), "station"),
        (("identify:", "identfy:"), "dialect"),
        (("compliance_bit: 3", "compliance_bit: three"), "dialect"),
    ],
)
def test_broken_stations_and_dialects_are_refused_by_the_schema(change, kind):
    source = (
        STATION
        if kind == "station"
        else (ROOT / "instruments/dialects/sense_protection_elements.yaml").read_text(
            encoding="utf-8"
        )
    )
    text = source.replace(*change, 1)
    assert text != source
    assert list(Draft202012Validator(schema(kind)).iter_errors(yaml.safe_load(text)))


# --- the loader reads through the models -------------------------------------------------------


def _recipe(tmp_path: Path, text: str) -> Path:
    (tmp_path / "demo-station.yaml").write_text(STATION)
    path = tmp_path / "r.yaml"
    path.write_text(text)
    return path


def _line_of(text: str, needle: str) -> int:
    return next(n for n, line in enumerate(text.splitlines(), 1) if needle in line)


@pytest.mark.parametrize(
    ("old", "new", "message"),
    [
        ("compliance: 5 mA\n      settle: 1 ms", "complance: 5 mA\n      settle: 1 ms",
         "steps[0].sweep.complance is not a known setting; did you mean 'compliance'?"),
        # sections that listed every known key before, now with the nearest one
        ("nplc: 0.1", "nplc: 0.1\nlimits: {max_voltag: 30 V}",
         "limits.max_voltag is not a known setting; did you mean 'max_voltage'?"),
        ("nplc: 0.1", "nplc: 0.1\nrepeat: {evry: 10 min}",
         "repeat.evry is not a known setting; did you mean 'every'?"),
        ("nplc: 0.1", "nplc: 0.1\nratings: {max_disipation: 1 W}",
         "ratings.max_disipation is not a known setting; did you mean 'max_dissipation'?"),
    ],
)  # fmt: skip
def test_an_unknown_key_is_named_at_its_line_with_the_nearest_known_one(
    tmp_path, old, new, message
):
    text = DEMO.replace(old, new, 1)
    assert text != DEMO
    path = _recipe(tmp_path, text)
    with pytest.raises(RecipeError) as caught:
        load_recipe(path)
    needle = message.split(" ", 1)[0].rsplit(".", 1)[-1] + ":"
    assert str(caught.value) == f"{path}:{_line_of(text, needle)}: {message}"


def test_an_unknown_station_key_is_named_with_the_nearest_known_one(tmp_path):
    text = STATION.replace("touch_safe_voltage: 42 V", "touch_safe_volts: 42 V")
    path = tmp_path / "s.yaml"
    path.write_text(text)
    with pytest.raises(RecipeError) as caught:
        load_station(path)
    line = _line_of(text, "touch_safe_volts")
    hint = "is not a known setting; did you mean 'touch_safe_voltage'?"
    assert str(caught.value) == f"{path}:{line}: limits.touch_safe_volts {hint}"


def test_the_demo_files_load_to_the_same_values_through_the_models():
    recipe = load_recipe(ROOT / "recipes/demo.yaml")
    assert recipe.steps[0].points == 81 and recipe.judge.coverage_factor == 2.0
    assert recipe.station.simulator_options == {  # devices: the tray's highest channel
        "devices": 20, "seed": 2611, "preset": "FLC-1.8", "spread": 1.3, "defect_rate": 0.05,
        "clock": "real",
    }  # fmt: skip
    assert recipe.station.limits.touch_safe_v == 42.0


# --- the dialect loaders check keys and types through the dialect format -----------------------


def test_the_dialect_format_has_every_key_the_smu_dialect_loader_reads():
    keys = [f.name for f in dataclasses.fields(dialect.Dialect)][:-2]  # without source, key_lines
    assert list(SmuDialect.model_fields) == keys
    required = {n for n, f in SmuDialect.model_fields.items() if f.is_required()}
    assert required == set(keys) - dialect.OPTIONAL_KEYS


def test_the_dialect_format_has_every_key_the_chamber_dialect_loader_reads():
    keys = [f.name for f in dataclasses.fields(chamber_dialect.ChamberDialect)][:-1]
    assert list(ChamberDialect.model_fields) == keys
    assert all(f.is_required() for f in ChamberDialect.model_fields.values())


def test_the_operations_the_driver_needs_are_the_keys_that_may_not_be_null():
    never_null = {n for n, f in SmuDialect.model_fields.items() if not _nullable(f.annotation)}
    assert never_null == {  # identify may be null: an instrument that answers no *IDN?
        "name", "reset", "next_error", "set_voltage", "set_current_limit", "output",
        "output_query", "measure", "measure_fields",
    }  # fmt: skip


def _nullable(annotation) -> bool:
    return type(None) in getattr(annotation, "__args__", ())


@pytest.mark.parametrize(
    ("file", "load", "old", "new", "said"),
    [
        ("scpi1999.yaml", dialect.load_dialect, "identify:", "identfy:",
         "key 'identfy': unknown key; did you mean 'identify'?"),
        ("scpi1999.yaml", dialect.load_dialect, "measure_fields:", "measure_field:",
         "key 'measure_field': unknown key; did you mean 'measure_fields'?"),
        ("chamber_text.yaml", chamber_dialect.load_chamber_dialect, "set_point:", "setpoint:",
         "key 'setpoint': unknown key; did you mean 'set_point'?"),
        ("chamber_text.yaml", chamber_dialect.load_chamber_dialect, "start: ", "start: 5 #",
         "key 'start': must be text (got 5)"),
    ],
)  # fmt: skip
def test_a_dialect_key_is_checked_by_the_format_at_its_line(tmp_path, file, load, old, new, said):
    text = (ROOT / "instruments/dialects" / file).read_text(encoding="utf-8")
    path = tmp_path / file
    path.write_text(text.replace(old, new, 1))
    with pytest.raises(dialect.DialectError) as caught:
        load(path)
    assert str(caught.value).startswith(f"{path}:{_line_of(text, old)}: {said}")


# --- start-up -----------------------------------------------------------------------------------


def test_the_help_does_not_import_pydantic():
    code = (
        "import sys\nfrom sequencer.cli.main import build_parser\nbuild_parser().format_help()\n"
        "print('pydantic' in sys.modules)"
    )
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert run.stdout.strip() == "False", run.stderr


def test_simulator_settings_reach_the_simulators_as_written(tmp_path):
    """The simulators read these numbers themselves: 3 stays 3, not 3.0 (and no warning)."""
    faults = "  faults:\n    - {kind: close, on: 'READ?', after: 3, chance: 0.5}\n"
    chamber = (
        "chamber: {resource: sim, lowest: -40 degC, highest: 125 degC, rate: 5 K/min, "
        "safe: 25 degC, simulator: {speed: 600, room: 21.5}}\n"
    )
    path = tmp_path / "s.yaml"
    path.write_text(STATION.replace("  clock: real\n", "  clock: real\n" + faults) + chamber)
    station = load_station(path)
    (fault,) = station.simulator_options["faults"]
    assert fault == {"kind": "close", "on": "READ?", "after": 3, "chance": 0.5}
    assert type(fault["after"]) is int and type(station.simulator_options["seed"]) is int
    assert station.chamber is not None
    assert station.chamber.simulator_options == {"speed": 600, "room": 21.5}
    assert type(station.chamber.simulator_options["speed"]) is int


def test_written_values_reach_the_dataclasses_as_before(tmp_path):
    """What the hand-written loader gave: a name written empty stays empty (a default only for
    a name left out), nplc as written."""
    text = DEMO.replace("      name: iv\n", "      name: ''\n").replace("nplc: 0.1", "nplc: 1")
    recipe = load_recipe(_recipe(tmp_path, text))
    assert recipe.steps[0].name == "" and recipe.nplc == 1 and type(recipe.nplc) is int
    text = DEMO.replace("      name: iv\n", "")
    assert load_recipe(_recipe(tmp_path, text)).steps[0].name == "sweep1"
