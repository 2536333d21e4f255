"""Settings registry and the ROS 2 parameter-file format."""
import pytest

from interaction_estimator.core.settings import (
    SPEC_BY_NAME,
    SPECS,
    Settings,
    SettingsError,
    per_joint,
)
from interaction_estimator.io.parameter_file import load_parameter_file, parameters_from_yaml


def test_defaults_validate_and_every_spec_has_unit_or_text():
    s = Settings()
    assert len(s) == len(SPECS)
    for spec in SPECS:
        assert spec.description.strip(), spec.name


@pytest.mark.parametrize("name,value,expected", [
    ("filter.change_threshold", 0.0,
     r"filter.change_threshold: 0.0 is out of range; expected \(0, 1e\+09\)"),
    ("filter.converged_fraction", 20.0,
     r"filter.converged_fraction: 20.0 is out of range; expected \[1e-06, 10\]"),
    ("filter.initial_std", [1, 2, -3, 4],
     r"filter.initial_std\[2\]: -3.0 kg, N·s/m, N/m, N is out"),
    ("direction.vector", [0, 0, 0], "has zero length"),
    ("direction.mode", "sideways", "expected one of 'world', 'contact', 'estimated'"),
    ("observer.gain", "fast", "not a list of numbers"),
    ("contact_framee", "x", "unknown setting 'contact_framee'; did you mean contact_frame"),
])
def test_bad_values_are_refused_with_name_value_and_range(name, value, expected):
    with pytest.raises(SettingsError, match=expected):
        Settings({name: value})


# Settings of the earlier object filter (random walk, online noise adaptation, windows in
# samples, thresholds in kg or N/m; issue 17) and the settings that replace them.
RETIRED_AND_REPLACEMENT = [
    ("filter.process_std", 1.0, "filter.memory"),
    ("filter.measurement_std_floor", 0.1, "filter.learn_noise"),
    ("filter.noise_adaptation", "sage_husa", "filter.learn_noise"),
    ("filter.fading_factor", 0.99, "filter.learn_noise"),
    ("filter.matching_window", 200, "filter.learn_noise"),
    ("filter.process_adaptation", "fixed", "filter.memory"),
    ("filter.nis_window", 1000, "filter.nis_time"),
    ("filter.change_inflation", 10.0, "filter.history_time"),
    ("filter.excitation_window", 0.5, "filter.excited_fraction"),
    ("filter.excitation_min", [0.05, 0.02, 0.01, 0.5], "filter.excited_fraction"),
    ("filter.converged_std", [0.2, 1.0, 5.0, 0.5], "filter.converged_fraction"),
    ("filter.converged_rel_std", 0.05, "filter.converged_fraction"),
]


@pytest.mark.parametrize("name,value,replacement", RETIRED_AND_REPLACEMENT)
def test_retired_settings_are_refused_naming_their_replacement(tmp_path, name, value,
                                                               replacement):
    # a file written for the earlier filter is refused rather than read with another meaning
    assert name not in SPEC_BY_NAME and replacement in SPEC_BY_NAME
    with pytest.raises(SettingsError) as err:
        Settings({name: value})
    assert f"setting {name!r} is no longer used" in str(err.value)
    assert replacement in str(err.value)
    group, leaf = name.split(".")
    path = tmp_path / "old.yaml"
    path.write_text(f"interaction_estimator:\n  ros__parameters:\n    {group}:\n"
                    f"      {leaf}: {value!r}\n".replace("'", '"'))
    with pytest.raises(SettingsError, match=f"old.yaml: setting '{name}' is no longer used"):
        load_parameter_file(path)


def test_yaml_sections_and_nesting(tmp_path):
    text = """
/**:
  ros__parameters:
    contact_frame: gripper_pad
    observer:
      gain: [30.0]
interaction_estimator:
  ros__parameters:
    observer:
      gain: [45.0, 50.0]
    filter:
      measurement_std: 1.5
"""
    flat = parameters_from_yaml(text)
    assert flat == {"contact_frame": "gripper_pad", "observer.gain": [45.0, 50.0],
                    "filter.measurement_std": 1.5}
    path = tmp_path / "p.yaml"
    path.write_text(text.replace("measurement_std: 1.5", "measurement_stdev: 1.5"))
    with pytest.raises(SettingsError, match="p.yaml: unknown setting 'filter.measurement_stdev'"):
        load_parameter_file(path)
    with pytest.raises(SettingsError, match="no section for this node"):
        parameters_from_yaml("other_node:\n  ros__parameters: {}\n")


def test_per_joint_lists():
    s = Settings({"bias.initial": [0.5]})
    assert per_joint(s, "bias.initial", ["a", "b"]) == [0.5, 0.5]
    s = Settings({"joint_names": ["b", "a"], "bias.initial": [1.0, 2.0]})
    assert per_joint(s, "bias.initial", ["a", "b", "c"]) == [2.0, 1.0, 0.0]
    with pytest.raises(SettingsError, match="3 values given; expected 1 or 2"):
        per_joint(Settings({"joint_names": ["b", "a"], "bias.initial": [1, 2, 3]}),
                  "bias.initial", ["a", "b"])


def test_exit_level_must_be_below_enter_level():
    with pytest.raises(SettingsError, match="contact.exit_level: 7.0 must be below"):
        Settings({"contact.exit_level": 7.0})
