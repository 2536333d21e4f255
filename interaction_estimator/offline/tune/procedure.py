"""The whole tuning: passes, segmentation, the fits, and the result."""
from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from collections.abc import Set as AbstractSet
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ...core.pipeline import Pipeline
from ...core.settings import Settings, SettingsError, per_joint
from ...io.parameter_file import settings_file_text
from .common import (
    CONTACT,
    FREE_ONLY_USE,
    LEARNING,
    MAX_SEGMENTATION_PASSES,
    MIN_BAG_DURATION,
    MIN_FREE_TIME,
    MIN_MOVING_TIME,
    TASK_SETTINGS,
    TuneError,
    _clamp,
)
from .entries import TunedEntry, build_entries
from .friction import Identification, check_model_fit, identify
from .model import ModelRequest, ModelResult, identify_robot
from .passes import Trace, run_pass
from .recordings import Recording
from .segments import Segment, contact_segments, contact_time, free_mask, margin

# ============================================================================================
# the whole tuning


@dataclass
class TuneResult:
    """Everything the tuning found: the robot's properties only, nothing about an object.

    settings: the base with the tuned values; entries: the tuned settings and their comments;
    identification: bias, friction and sensor noise; segments: free and contact stretches
    found (bag index, times s; contact is only reported, nothing is fitted to it); warnings:
    things the user should know; bags: names; joints: model joint order; base: the base
    settings; traces: last pass per bag; free_only: indices of the bags in which the contact
    monitor found no contact (free motion only); contact_time: s of contact found over all
    bags; model: the robot's identified dynamics, when asked (None: the URDF as given)."""

    settings: Settings
    base: Settings
    entries: dict[str, TunedEntry]
    identification: Identification
    segments: list[Segment]
    warnings: list[str]
    bags: list[str]
    joints: tuple[str, ...]
    passes: int
    traces: list[Trace] = field(default_factory=list)
    written: list[str] = field(default_factory=list)
    taps: list[Trace] = field(default_factory=list)
    masks: list[np.ndarray] = field(default_factory=list)
    free_only: list[int] = field(default_factory=list)
    contact_time: float = 0.0
    model: ModelResult | None = None

    def parameter_file(self, header: Sequence[str]) -> str:
        """The ROS 2 parameter YAML text of the result."""
        return settings_file_text(self.settings, {*self.written, *self.entries},
                                  {n: e.comment for n, e in self.entries.items()}, header)


def bag_settings(base: Settings, recommended: Mapping[str, Any], params: Mapping[str, Any],
                 tuned: Mapping[str, Any]) -> Settings:
    """Settings for one bag's pass: defaults <- the bag's recommendations <- the parameter file
    <- tuned values (the replay's order, plus the tuning)."""
    try:
        s = Settings().replace(dict(recommended))
    except SettingsError as exc:
        raise TuneError(f"the bag's recommended settings are not valid: {exc}") from None
    return s.replace({**params, **tuned})


def _check_inputs(recs: Sequence[Recording], base: Settings) -> None:
    for rec in recs:
        if len(rec.samples) < 2 or rec.duration < MIN_BAG_DURATION:
            raise TuneError(
                f"{rec.name}: too short ({len(rec.samples)} joint states over "
                f"{rec.duration:.2f} s); expected at least {MIN_BAG_DURATION:g} s starting "
                f"with free motion (bias.startup = {base['bias.startup']:g} s at the start)")


def tune(recordings: Sequence[Recording], urdf: str, params: Mapping[str, Any] | None = None,
         log: Callable[[str], None] | None = None, model: ModelRequest | None = None
         ) -> TuneResult:
    """Identify the robot's bias, friction and sensor noise (and, when asked, its dynamics)
    from the free motion of the recordings; returns the tuned settings. Bags of free motion
    alone serve as well as task bags (whose free-motion stretches are used); nothing is
    identified from contact, and nothing about an object is written.

    urdf: the robot description (text). params: settings from the base parameter file, flat
    dotted names (None: none). log: progress messages. model: what of the robot's own
    dynamics to identify from free motion (None or nothing asked: the URDF is used as given;
    see :mod:`.model`); the rest of the tuning then runs with the identified model. Raises
    TuneError (or SettingsError, ModelError) with a message naming what is missing.
    """
    say = log or (lambda _m: None)
    params = dict(params or {})
    if not recordings:
        raise TuneError("no recordings given; expected one or more bags")
    common = _common_recommendations(recordings)
    base = Settings().replace(common).replace(params)
    _check_inputs(recordings, base)
    identified = None
    if model is not None and model.wanted:
        Pipeline(bag_settings(base, recordings[0].recommended, params, {}), urdf)  # validates
        identified = identify_robot(
            recordings, urdf, base, params, model,
            lambda r: bag_settings(base, r.recommended, params, {}), say)
        urdf = identified.urdf
    named_free = set(model.free_motion) if model is not None else set()
    result = _tune_settings(recordings, urdf, params, say, common, base, named_free)
    result.model = identified
    return result


def _tune_settings(recordings: Sequence[Recording], urdf: str, params: dict[str, Any],
                   say: Callable[[str], None], common: dict[str, Any], base: Settings,
                   named_free: AbstractSet[int] = frozenset()) -> TuneResult:
    """Bias, friction and sensor noise (steps 1-3 of the package text) with the URDF
    ``urdf``. named_free: indices of the recordings the user named free motion from start to
    end (``--free-motion``): used whole, whatever the contact monitor says of them (it needs
    the friction this step identifies: on motor-side efforts it may take unmodelled friction
    for contact and hold it, leaving too little free motion to learn the friction from)."""
    per_bag = [bag_settings(base, r.recommended, params, {}) for r in recordings]
    pipe = Pipeline(per_bag[0], urdf)  # validates URDF, contact frame and per-joint lists
    joints = pipe.model.joint_names
    clear = margin(base, joints)
    warnings = _joint_name_warnings(recordings, joints)

    say(f"pass 1: {len(recordings)} bag(s) through the pipeline with the base settings")
    taps = [run_pass(r, s, urdf, taps=True) for r, s in zip(recordings, per_bag)]
    startup = base["bias.startup"] > 0 and any((t.phase == LEARNING).any() for t in taps)
    masks = [free_mask(t, clear, startup_only=startup, whole=b in named_free)
             for b, t in enumerate(taps)]
    _require_free(recordings, masks, taps, clear)
    ident = identify(taps, masks, base, joints)
    traces = taps
    passes = 1
    def segmentation_pass() -> list[Trace]:
        nonlocal passes
        tuned_vals = _pass_values(ident, joints)
        settings_b = [bag_settings(base, r.recommended, params,
                                   {**tuned_vals, "bias.initial": ident.bias_of_bag(b)})
                      for b, r in enumerate(recordings)]
        passes += 1
        say(f"pass {passes}: re-segmenting with the identified bias and friction")
        return [run_pass(r, s, urdf) for r, s in zip(recordings, settings_b)]

    for _ in range(MAX_SEGMENTATION_PASSES):
        traces = segmentation_pass()
        new_masks = [free_mask(t, clear, startup_only=False, whole=b in named_free)
                     for b, t in enumerate(traces)]
        _require_free(recordings, new_masks, traces, clear)
        if _same_masks(masks, new_masks):
            break
        masks = new_masks
        ident = identify(taps, masks, base, joints)
    else:  # the values changed after the last pass: the segments reported come from them
        traces = segmentation_pass()
    check_model_fit(ident, any(bool((t.phase == CONTACT).any()) for t in traces))
    warnings += _friction_warnings(ident)
    segments = list(ident.free_segments)
    for b, t in enumerate(traces):
        if b in named_free:
            seen = contact_time(t)
            if seen > 0:
                first = float(t.time[np.argmax(t.phase == CONTACT)])
                warnings.append(
                    f"{recordings[b].name} was named free motion, but the contact monitor, "
                    f"with the tuned values, saw {seen:.2f} s of contact in it (first at "
                    f"{first:.2f} s); it was used whole as free motion, as named. If the robot "
                    "touched something there, leave that bag out of --free-motion")
            continue
        segments += contact_segments(b, t)
    free_only = [b for b, t in enumerate(traces)
                 if b in named_free or not (t.phase == CONTACT).any()]
    if free_only:
        say("no contact in " + ", ".join(recordings[b].name for b in free_only)
            + ": " + FREE_ONLY_USE)
    entries = build_entries(ident, base, joints, recordings)
    values = {**_per_joint_in_model_order(base, joints),
              **{name: e.value for name, e in entries.items()}}
    tuned_settings = base.replace(values)
    robot_common = [k for k in common if not _is_task_setting(k)]
    written = list(params) + [k for k in robot_common if k not in params]
    differing = sorted({k for r in recordings for k in r.recommended if not _is_task_setting(k)}
                       - set(common) - set(params))
    if differing:
        warnings.append(f"the bags recommend different values for {differing}: not written; "
                        "set them in the parameter file")
    return TuneResult(tuned_settings, base, entries, ident, segments, warnings,
                      [r.name for r in recordings], joints, passes, traces, written, taps, masks,
                      free_only, sum(contact_time(t) for b, t in enumerate(traces)
                                     if b not in named_free))


def _is_task_setting(name: str) -> bool:
    """A setting of the task or the object (direction, object filter), not of the robot: a
    bag's recommendation of it is used for that bag's passes only, never written."""
    return name.startswith(TASK_SETTINGS)


PER_JOINT_SETTINGS = ("observer.gain", "bias.initial", "friction.viscous", "friction.coulomb")


def _per_joint_in_model_order(base: Settings, joints: Sequence[str]) -> dict[str, list[float]]:
    """The base's per-joint lists with one value per joint, re-expressed in the model's joint
    order (the written file lists ``joint_names`` in that order)."""
    return {name: [float(v) for v in per_joint(base, name, joints)]
            for name in PER_JOINT_SETTINGS if len(base[name]) > 1}


def _common_recommendations(recs: Sequence[Recording]) -> dict[str, Any]:
    """Settings the bags recommend alike (simulated bags recommend their task's direction). A bag
    that recommends nothing for a setting has no say on it (a commissioning bag, which has no
    object, recommends no direction)."""
    keys = dict.fromkeys(k for r in recs for k in r.recommended)
    out = {}
    for k in keys:
        values = [r.recommended[k] for r in recs if k in r.recommended]
        if all(v == values[0] for v in values[1:]):
            out[k] = values[0]
    return out


def _joint_name_warnings(recs: Sequence[Recording], joints: Sequence[str]) -> list[str]:
    extra = sorted({n for r in recs for n in r.samples[0].names} - set(joints))
    if not extra:
        return []
    return [f"joints {extra} are in the joint states but not in the URDF; they were ignored"]


def _pass_values(ident: Identification, joints: Sequence[str]) -> dict[str, Any]:
    return {"joint_names": list(joints),
            "friction.viscous": [max(j.viscous, 0.0) for j in ident.joints],
            "friction.coulomb": [max(j.coulomb, 0.0) for j in ident.joints],
            "observer.effort_noise": _clamp("observer.effort_noise", ident.effort_noise),
            "observer.velocity_noise": _clamp("observer.velocity_noise", ident.velocity_noise)}



def _same_masks(a: Sequence[np.ndarray], b: Sequence[np.ndarray]) -> bool:
    changed = sum(int(np.sum(x != y)) for x, y in zip(a, b) if len(x) == len(y))
    total = max(sum(int(x.sum()) for x in a), 1)
    return all(len(x) == len(y) for x, y in zip(a, b)) and changed <= 0.01 * total


def _require_free(recs: Sequence[Recording], masks: Sequence[np.ndarray],
                  traces: Sequence[Trace], clear: float) -> None:
    times = [float(np.sum(np.diff(t.time, prepend=t.time[0])[m])) for t, m in zip(traces, masks)]
    if sum(times) >= MIN_FREE_TIME:
        return
    per = ", ".join(f"{r.name}: {x:.2f} s" for r, x in zip(recs, times))
    raise TuneError(
        f"not enough free motion: {sum(times):.2f} s usable over all bags ({per}); expected at "
        f"least {MIN_FREE_TIME:g} s of the robot moving without touching anything, more than "
        f"{clear:.2f} s away from contact (record the bag from before the robot reaches the "
        "object)")


def _friction_warnings(ident: Identification) -> list[str]:
    out = []
    for j in ident.joints:
        if j.friction_note and not j.friction_note.startswith("link-side"):
            one_way = max(j.moving_time) >= MIN_MOVING_TIME
            out.append(f"{j.name}: friction not identified ({j.friction_note}); base friction "
                       "kept." + (" Its bias includes part of its Coulomb friction (it moved "
                                  "one way only)." if one_way else ""))
        elif j.friction_identified:
            for label, val, ci in (("viscous", j.viscous, j.viscous_ci),
                                   ("Coulomb", j.coulomb, j.coulomb_ci)):
                if math.isfinite(ci) and ci > 0.5 * max(abs(val), 1e-9):
                    out.append(f"{j.name}: {label} friction poorly determined "
                               f"({val:.3g} +/- {ci:.2g}); move the joint faster and both ways")
    return out


