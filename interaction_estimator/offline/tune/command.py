"""The ``tune`` command: arguments, inputs, the account printed, exit codes."""
from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path
from typing import Any, Mapping, Sequence

from ...core.environment import PARAMETER_NAMES
from ...core.model import ModelError
from ...core.settings import SettingsError
from .common import EXIT_OK, EXIT_USAGE, FREE_ONLY_USE, PROG, REPORT_NAME, TuneError
from .entries import _interval, file_header, write_text_atomic
from .procedure import TuneResult, tune
from .recordings import Recording, read_bag


# ============================================================================================
# explanation


def explain(result: TuneResult) -> str:
    """A plain-text account of what was found (printed by the command)."""
    r, ident, noise = result, result.identification, result.noise
    out = [f"bags: {len(r.bags)}; pipeline passes: {r.passes}"]
    out.append("segments used (bag, kind, s):")
    for s in sorted(r.segments, key=lambda s: (s.bag, s.start)):
        out.append(f"  bag {s.bag + 1}  {s.kind:<7} {s.start:9.3f} .. {s.end:9.3f}"
                   f"  ({s.duration:.2f} s)")
    for b in r.free_only:
        out.append(f"  bag {b + 1}  no contact: {FREE_ONLY_USE}")
    out.append(f"free motion: {ident.free_time:.2f} s; contact: {noise.contact_time:.2f} s "
               f"({noise.updates} filter updates)")
    out.append(f"{'joint':<24}{'bias':>10}{'+/-':>8}{'viscous':>10}{'+/-':>8}{'coulomb':>10}"
               f"{'+/-':>8}{'resid':>8}{'noise':>8}{'effort':>8}{'veloc':>9}")
    for j in ident.joints:
        def ci(x: float) -> str:
            return f"{x:8.3g}" if math.isfinite(x) else f"{'kept':>8}"
        out.append(f"{j.name:<24}{j.bias[-1]:10.4g}{j.bias_ci[-1]:8.2g}{j.viscous:10.4g}"
                   f"{ci(j.viscous_ci)}{j.coulomb:10.4g}{ci(j.coulomb_ci)}"
                   f"{j.residual_std:8.3g}{j.explained_std:8.3g}{j.effort_noise:8.3g}"
                   f"{j.velocity_noise:9.3g}")
    out.append("  (bias of the last bag; 'resid': free-motion residual left by the fit, 'noise':"
               " what the sensor noise explains, both RMS)")
    out.append(f"sensor noise: effort {ident.effort_noise:.4g} N·m, velocity "
               f"{ident.velocity_noise:.4g} rad/s (medians over joints)")
    lo, hi = noise.measurement_interval
    if len(noise.per_bag_std) > 1:
        out.append("measurement std each bag alone: " + ", ".join(
            f"{v:.3g} N" if b not in r.free_only else "no contact"
            for b, v in enumerate(noise.per_bag_std)))
    out.append(f"environment filter: measurement std {noise.measurement_std:.4g} N "
               f"(95 %: {_interval(lo, hi)}); mean NIS {noise.nis_base:.3g} at the base values ->"
               f" {noise.nis_tuned:.3g} tuned (fixed noise); innovations decimated by "
               f"{noise.decimation} for the likelihood (lag-1 autocorrelation "
               f"{noise.innovation_correlation:.2f}); {noise.evaluations} filter runs")
    for i, p in enumerate(PARAMETER_NAMES):
        state = ("tuned" if noise.tuned[i] else "kept")
        out.append(f"  process std {p:<13} {noise.process_std[i]:10.4g}  {state}"
                   f"  excited {100 * noise.excited_fraction[i]:.0f} %"
                   + (f"  ({_interval(*noise.process_interval[i])})" if noise.tuned[i] else "")
                   + (f"  {noise.notes[i]}" if noise.notes[i] else ""))
    for w in r.warnings:
        out.append(f"warning: {w}")
    return "\n".join(out)


# ============================================================================================
# command line


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The ``tune`` subcommand's arguments."""
    parser.add_argument("bags", nargs="+", metavar="BAG", type=Path,
                        help="rosbag2 bags (directory, .mcap or .db3) of the robot moving freely "
                             "and then handling an object")
    parser.add_argument("--out", required=True, type=Path, metavar="FILE",
                        help="parameter YAML to write (the base with the tuned values)")
    parser.add_argument("--params", type=Path, metavar="BASE",
                        help="base parameter YAML (default: the defaults and the bags' "
                             "recommended settings)")
    parser.add_argument("--urdf", type=Path, metavar="FILE",
                        help="URDF of the robot (default: robot_description_file, else the "
                             "bag's robot_description)")
    parser.add_argument("--report", type=Path, metavar="DIR",
                        help=f"also write DIR/{REPORT_NAME}: default against tuned settings on "
                             "held-out data")
    parser.add_argument("--topics", nargs="+", default=[], metavar="ROLE=TOPIC",
                        help="topic of a role: joint_states, joint_efforts, robot_description "
                             "(e.g. joint_states=/marten/joint_states)")


def _check_out(out: Path, report: Path | None) -> None:
    if out.exists() and out.is_dir():
        raise TuneError(f"--out {str(out)!r} is a directory; expected a file path for the "
                        "parameter YAML")
    if not out.parent.is_dir():
        raise TuneError(f"cannot write {str(out)!r}: directory {str(out.parent)!r} does not "
                        "exist")
    if report is not None:
        if report.exists() and not report.is_dir():
            raise TuneError(f"--report {str(report)!r} is a file; expected a directory")
        if not report.exists() and not report.parent.is_dir():
            raise TuneError(f"cannot write the report into {str(report)!r}: directory "
                            f"{str(report.parent)!r} does not exist")


def _load_inputs(args: argparse.Namespace) -> tuple[list[Recording], str, dict[str, Any], str]:
    from ...core.settings import load_parameter_file, parameters_from_yaml
    recs = [read_bag(Path(b), args.topics) for b in args.bags]
    params: dict[str, Any] = {}
    base_source = "defaults and the bags' recommended settings"
    if args.params is not None:
        load_parameter_file(args.params)  # validates: unknown names, ranges
        params = parameters_from_yaml(Path(args.params).read_text(encoding="utf-8"),
                                      str(args.params))
        base_source = f"{args.params}"
    urdf = _load_urdf(args.urdf, params, recs)
    return recs, urdf, params, base_source


def _load_urdf(urdf: Path | None, params: Mapping[str, Any], recs: Sequence[Recording]) -> str:
    if urdf is not None:
        try:
            return Path(urdf).read_text(encoding="utf-8")
        except OSError as exc:
            raise TuneError(f"URDF file {str(urdf)!r} cannot be read: {exc.strerror}") from None
    path = params.get("robot_description_file") or ""
    if path:
        try:
            return Path(path).read_text(encoding="utf-8")
        except OSError as exc:
            raise TuneError(f"robot_description_file {path!r} cannot be read: "
                            f"{exc.strerror}") from None
    texts = {r.urdf for r in recs if r.urdf}
    if not texts:
        raise TuneError("no URDF: the bags have no robot_description and none was given; "
                        "expected --urdf FILE (or robot_description_file in --params)")
    if len(texts) > 1:
        raise TuneError("the bags carry different robot descriptions (different robots?); "
                        "expected bags of one robot, or --urdf FILE to choose its URDF")
    return texts.pop()


def run(args: argparse.Namespace) -> int:
    """Run the tuning for parsed arguments; returns the exit code (0 ok, 2 bad input)."""
    from ...io.bag import BagError
    try:
        _check_out(Path(args.out), args.report)
        recs, urdf, params, base_source = _load_inputs(args)
        result = tune(recs, urdf, params, log=lambda m: print(m, file=sys.stderr))
        text = result.parameter_file(file_header(result, base_source))
        report_html = None
        if args.report is not None:
            from .report import build_tuning_report
            report_html = build_tuning_report(result, recs, urdf, params)
        write_text_atomic(Path(args.out), text)
        if report_html is not None:
            Path(args.report).mkdir(exist_ok=True)
            write_text_atomic(Path(args.report) / REPORT_NAME, report_html)
    except (TuneError, BagError, SettingsError, ModelError) as exc:
        print(f"{PROG}: error: {exc}", file=sys.stderr)
        print("no file written", file=sys.stderr)
        return EXIT_USAGE
    print(explain(result))
    print(f"wrote {args.out}" + (f" and {Path(args.report) / REPORT_NAME}"
                                 if args.report is not None else ""))
    return EXIT_OK


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog=PROG, description=(
        "Identify torque bias, joint friction and noise levels from recorded bags and write "
        "them into a parameter file."))
    add_arguments(parser)
    return run(parser.parse_args(argv))
