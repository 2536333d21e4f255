"""The committed parameter files against the settings registry they come from.

References: the generator run now (config/default.yaml must be its output, so the file never
drifts from SPECS), load_parameter_file (the package's reader, which refuses unknown names and
bad values), PyYAML's own parse, and the Marten URDF for the demo file's frame.
"""
from __future__ import annotations

import yaml
from ros_harness import REPO

from interaction_estimator.core.model import RobotModel
from interaction_estimator.core.settings import RETIRED, SPEC_BY_NAME, SPECS, Settings, flatten
from interaction_estimator.io import parameter_file as config_file
from interaction_estimator.io.parameter_file import load_parameter_file
from interaction_estimator.sim import marten

DEFAULT_YAML = REPO / "config" / "default.yaml"
DEMO_YAML = REPO / "config" / "marten_demo.yaml"


def test_committed_default_equals_the_generated_file():
    # reference: the generator run on today's SPECS; regenerate with
    #   python -m interaction_estimator.io.parameter_file --write config/default.yaml
    assert DEFAULT_YAML.read_text(encoding="utf-8") == config_file.generate()
    assert config_file.main(["--check", str(DEFAULT_YAML)]) == 0


def test_default_file_loads_to_the_registry_defaults():
    loaded = load_parameter_file(DEFAULT_YAML)  # reference: the package's reader
    assert loaded.to_flat() == Settings().to_flat()
    doc = yaml.safe_load(DEFAULT_YAML.read_text())  # reference: PyYAML
    assert list(doc) == ["/**/interaction_estimator"]  # any namespace, this node only
    flat = flatten(doc["/**/interaction_estimator"]["ros__parameters"])
    assert sorted(flat) == sorted(s.name for s in SPECS)
    for name, value in flat.items():  # YAML types as declared (floats stay floats)
        assert type(value) is type(SPEC_BY_NAME[name].default), name


def test_every_entry_is_commented_with_unit_range_and_tuning_keys_exist():
    text = DEFAULT_YAML.read_text()
    for spec in SPECS:
        head = f"# {spec.name} ("
        assert head in text, spec.name
        lines = text[text.index(head):].split("\n")
        block = []
        for line in lines:  # the comment block, up to the value line it describes
            if not line.strip().startswith("#"):
                assert line.strip().startswith(spec.name.split(".")[-1] + ":"), line
                break
            block.append(line.strip().lstrip("#").strip())
        comment = " ".join(block)
        if spec.unit:
            assert spec.unit in comment.split("Allowed")[0], spec.name
        assert "Allowed: " in comment
    assert set(config_file.TUNING) <= set(SPEC_BY_NAME)  # no hint for a setting that is gone
    for name in ("filter.measurement_std", "filter.learn_noise", "filter.initial_std",
                 "filter.converged_fraction"):
        assert name in config_file.TUNING


def test_no_retired_setting_is_named_in_the_committed_files():
    # reference: the registry's list of retired names (a file that sets one is refused); the
    # generated comments must not send a user to one of them
    for path in (DEFAULT_YAML, DEMO_YAML):
        text = path.read_text(encoding="utf-8")
        named = [name for name in RETIRED if name in text]
        assert not named, (path.name, named)


def test_yaml_values_read_back_alike():
    # reference: PyYAML reads the generator's text back to the same value and type
    for value in (1e-9, 1e20, 0.0005, 9.80665, 3, True, "", "tool_tip", "yes", [], [1.5, -2.0],
                  ["a b", "c"], "N·m"):
        assert yaml.safe_load(f"x: {config_file.yaml_value(value)}")["x"] == value


def test_marten_demo_file_loads_and_names_a_frame_of_the_robot():
    settings = load_parameter_file(DEMO_YAML)
    assert settings["robot_description_file"] == ""
    model = RobotModel(marten.mobile_urdf(), settings["contact_frame"])  # reference: the URDF
    assert model.contact_frame == marten.CONTACT_FRAME
