"""The config package: the schema table is generated from the typed section and kind
dataclasses, which are frozen and fully typed; a loaded scenario carries typed tables."""

from __future__ import annotations

import dataclasses
import subprocess
import sys
import typing
from pathlib import Path
from typing import Any, Literal, get_args, get_origin

import pytest
from conftest import scenario_text

from gridpop import config
from gridpop.config.kinds import KIND_CLASSES
from gridpop.config.schema import META
from gridpop.config.sections import SECTION_CLASSES
from gridpop.errors import ScenarioError

ROOT = Path(__file__).resolve().parents[1]

KIND_CASES = [(name, kind, cls) for name, kinds in KIND_CLASSES.items()
              for kind, cls in kinds.items()]
ALL_CLASSES = [*SECTION_CLASSES.values(), *(cls for _, _, cls in KIND_CASES)]


def literal_choices(hint: object) -> tuple[str, ...]:
    """The strings of the Literal inside an annotation (``Literal``, ``X | None``,
    ``tuple[X, ...]``); () when there is none."""
    if get_origin(hint) is Literal:
        return get_args(hint)
    for arg in get_args(hint):
        if arg is not type(None) and arg is not Ellipsis and literal_choices(arg):
            return literal_choices(arg)
    return ()


def mentions_any(hint: object) -> bool:
    return hint is Any or any(mentions_any(a) for a in get_args(hint))


def check_table(cls: type, keys: tuple[config.Key, ...], skip: tuple[str, ...]) -> None:
    """``keys`` lists exactly the fields of ``cls`` (less ``skip``), in order, each documented,
    with the field's default (or REQUIRED) and the choices of its Literal."""
    hints = typing.get_type_hints(cls)
    fields = [f for f in dataclasses.fields(cls) if f.name not in skip]
    assert [k.name for k in keys] == [f.name for f in fields]
    for k, f in zip(keys, fields, strict=True):
        assert k.doc and k.doc == f.metadata[META].doc, (cls, f.name)
        assert k.doc.endswith((".", ")")), (cls, f.name, k.doc)
        if f.default is dataclasses.MISSING:
            assert k.default is config.REQUIRED
            assert k.example is not None, f"{cls.__name__}.{f.name}: required, no example"
        else:
            assert k.default == f.default
        assert k.choices == literal_choices(hints[f.name]), (cls, f.name)


@pytest.mark.parametrize("name", list(SECTION_CLASSES))
def test_section_table_is_generated_from_the_dataclass(name):
    doc, keys = config.SECTIONS[name]
    cls = SECTION_CLASSES[name]
    assert doc == " ".join(cls.__doc__.split())
    check_table(cls, keys, ())


@pytest.mark.parametrize(("name", "kind", "cls"), KIND_CASES)
def test_kind_table_is_generated_from_the_dataclass(name, kind, cls):
    _, kinds = config.ARRAY_SECTIONS[name]
    doc, keys = kinds[kind]
    assert get_args(typing.get_type_hints(cls)["kind"]) == (kind,)
    assert typing.get_type_hints(cls)["label"] is str
    assert doc == " ".join(cls.__doc__.split())
    check_table(cls, keys, ("label", "kind"))


def test_array_sections_list_the_kinds_of_the_unions():
    assert set(config.ARRAY_SECTIONS) == {"disturbance", "action"}
    assert tuple(KIND_CLASSES["disturbance"].values()) == get_args(config.DisturbanceConfig)
    assert tuple(KIND_CLASSES["action"].values()) == get_args(config.ActionConfig)
    assert list(config.ARRAY_SECTIONS["action"][1]) == [
        "reserve", "corridor", "barrier", "restoration", "habitat_loss", "release", "removal"]


def test_key_types_follow_the_annotations():
    """A few annotations and the key types (hence the checks and the docs) they give."""
    def key(section, name, kinds=None):
        keys = config.SECTIONS[section][1] if kinds is None else \
            config.ARRAY_SECTIONS[section][1][kinds][1]
        (k,) = [k for k in keys if k.name == name]
        return k.type, k.choices

    assert key("run", "years") == ("int", ())
    assert key("growth", "stochastic") == ("bool", ())
    assert key("growth", "model") == ("str", config.GROWTH_MODELS)
    assert key("habitat", "suitability") == ("path", ())
    assert key("grid", "template") == ("path", ())
    assert key("dispersal", "mean_distance_m") == ("float", ())
    assert key("output", "rasters") == ("strlist", config.OUTPUT_RASTERS)
    assert key("disturbance", "return_period_years", "flood") == ("floatlist", ())
    assert key("disturbance", "return_interval_years", "fire") == ("float", ())
    assert key("habitat", "future") == ("tables", ())
    assert key("habitat", "change") == ("str", config.CHANGES)
    assert key("disturbance", "zone", "flood") == ("pathlist", ())
    assert key("disturbance", "recovery", "fire") == ("str", config.RECOVERY)


def test_choice_tuples_are_the_literal_choices_used_by_the_keys():
    pairs = {config.GROWTH_MODELS: config.GrowthModel, config.KERNELS: config.Kernel,
             config.EDGES: config.Edge, config.DISPERSAL_METHODS: config.DispersalMethod,
             config.RESPONSES: config.Response, config.OUTPUT_RASTERS: config.OutputRaster,
             config.FIRE_SIZES: config.FireSize, config.RECOVERY: config.Recovery,
             config.CHANGES: config.Change}
    used = {k.choices for _, keys in config.SECTIONS.values() for k in keys}
    used |= {k.choices for _, kinds in config.ARRAY_SECTIONS.values()
             for _, keys in kinds.values() for k in keys}
    for choices, alias in pairs.items():
        assert choices == get_args(alias) and len(choices) >= 2
        assert choices in used, choices


@pytest.mark.parametrize("cls", [*ALL_CLASSES, config.Scenario], ids=lambda c: c.__name__)
def test_config_classes_are_frozen_and_fully_typed(cls):
    assert dataclasses.is_dataclass(cls) and cls.__dataclass_params__.frozen
    hints = typing.get_type_hints(cls)
    assert set(hints) == {f.name for f in dataclasses.fields(cls)}
    for name, hint in hints.items():
        assert not mentions_any(hint), f"{cls.__name__}.{name}: {hint}"


def test_scenario_holds_typed_frozen_sections_and_tables(make_scenario):
    path = make_scenario(scenario_text() + """
[[disturbance]]
kind = "fire"
return_interval_years = 30.0
mortality = 0.5

[[action]]
kind = "barrier"
area = "{suitability}"

[[action]]
kind = "reserve"
area = "{suitability}"
""")
    s = config.load_scenario(path)
    hints = typing.get_type_hints(config.Scenario)
    for name in config.SECTIONS:
        assert isinstance(getattr(s, name), hints[name])
    assert [type(a) for a in s.actions] == [config.BarrierConfig, config.ReserveConfig]
    assert [a.label for a in s.actions] == ["action #1 (barrier)", "action #2 (reserve)"]
    assert s.actions[0].all_touched is True and s.actions[1].all_touched is False
    (fire,) = s.disturbances
    assert isinstance(fire, config.FireConfig) and fire.recovery_years == 10.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        s.run.years = 3
    with pytest.raises(dataclasses.FrozenInstanceError):
        fire.mortality = 0.1


def test_replace_validates_and_keeps_the_rest(make_scenario):
    s = config.load_scenario(make_scenario(scenario_text()))
    t = s.replace("output", rasters=["abundance"])
    assert t.output.rasters == ("abundance",) and t.run == s.run
    assert s.output.rasters == config.OUTPUT_RASTERS
    with pytest.raises(ScenarioError, match=r"\[run\] years = 0 is not allowed; expected an "
                                            r"integer with 1 <= value\."):
        s.replace("run", years=0)
    with pytest.raises(ScenarioError, match=r"unknown key 'yeras'; did you mean 'years'\?"):
        s.replace("run", yeras=3)


def test_module_command_prints_the_reference():
    out = subprocess.run([sys.executable, "-m", "gridpop.config"], capture_output=True,
                         text=True, check=True, cwd=ROOT).stdout
    assert out == (ROOT / "docs" / "scenario.md").read_text()
