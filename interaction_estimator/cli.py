"""``interaction-estimator``: the package's command line.

Subcommands (each one an entry of :data:`COMMANDS`; a new one is one more entry):

* ``run [--managed] [--ros-args ...]``: the ROS 2 node (everything after ``run`` goes to it;
  ``--managed``: a lifecycle node);
* ``replay BAG [BAG ...] --out DIR``: offline estimates, summary and report from bags;
* ``simulate SCENARIO --out BAG``: a built-in invented scenario written as a bag with its
  ground truth;
* ``tune BAG [BAG ...] --out FILE``: the robot's bias, friction and sensor noise identified
  from the free motion in bags, written as a parameter file (and the robot's own dynamics as a
  URDF); nothing about any object;
* ``excitation --urdf FILE --out DIR``: the commissioning motion for that identification.

Exit codes: 0 success; 2 a usage error or bad input (the message names the value and what was
expected); 1 an unexpected failure (a defect: please report it with the traceback).
"""
from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

PROG = "interaction-estimator"
EXIT_OK, EXIT_FAILURE, EXIT_USAGE = 0, 1, 2


class UsageError(Exception):
    """Bad input found after parsing; printed as ``PROG CMD: error: message``, exit 2."""


@dataclass(frozen=True)
class Command:
    """A subcommand: its name, one-line help, argument set-up and what it does (-> exit code)."""

    name: str
    help: str
    add_arguments: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], int]


# --------------------------------------------------------------------------------------------
# argument types (their messages name the bad value and what is expected)


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number; expected 1 or "
                                         "more") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{value} is below 1; expected 1 or more")
    return value


def _seed(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number; expected an "
                                         "integer >= 0") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"{value} is negative; expected an integer >= 0")
    return value


def _seconds(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number of seconds") from None
    if not (value > 0 and value < float("inf")):
        raise argparse.ArgumentTypeError(f"{text!r} s is not allowed; expected a positive "
                                         "number of seconds")
    return value


def _non_negative(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not (0 <= value < float("inf")):
        raise argparse.ArgumentTypeError(f"{text!r} is not allowed; expected a number >= 0")
    return value


def _share(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not (0 <= value <= 1):
        raise argparse.ArgumentTypeError(f"{text!r} is not allowed; expected a share in "
                                         "[0, 1]")
    return value


def _hertz(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number of Hz") from None
    if not (value > 0 and value < float("inf")):
        raise argparse.ArgumentTypeError(f"{text!r} Hz is not allowed; expected a positive "
                                         "rate in Hz")
    return value


# --------------------------------------------------------------------------------------------
# run


def _run_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("ros_args", nargs=argparse.REMAINDER,
                   help="passed to the node, e.g. --managed (a lifecycle node) --ros-args "
                        "--params-file FILE -r __ns:=/marten")


def _run(args: argparse.Namespace) -> int:
    from .ros.node import main as node_main
    result = node_main(list(args.ros_args))
    return int(result or 0)


# --------------------------------------------------------------------------------------------
# replay


def _replay_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("bags", nargs="+", metavar="BAG", type=Path,
                   help="rosbag2 bag (directory, .mcap or .db3), a directory of bags, or a "
                        "quoted glob pattern of bags; several run in parallel, one task each")
    p.add_argument("--out", required=True, type=Path, metavar="DIR",
                   help="output directory, made with its missing parents (one subdirectory "
                        "per bag when several)")
    p.add_argument("--params", type=Path, metavar="FILE",
                   help="ROS 2 parameter YAML of the node (the same file as on the robot)")
    p.add_argument("--urdf", type=Path, metavar="FILE",
                   help="URDF of the robot (default: the bag's robot_description)")
    p.add_argument("--topics", nargs="+", default=[], metavar="ROLE=TOPIC",
                   help="topic of a role: joint_states, joint_efforts, robot_description, "
                        "reference, parameters (e.g. joint_states=/marten/joint_states)")
    p.add_argument("--reference-topic", metavar="TOPIC",
                   help="WrenchStamped topic (world frame) to compare the force with "
                        "(default: ground_truth/wrench when present)")
    p.add_argument("--ignore-bag-settings", action="store_true",
                   help="do not apply the settings recommended in a simulated bag's ground "
                        "truth (only the defaults and --params)")
    p.add_argument("--no-report", dest="report", action="store_false",
                   help="write estimates.csv and summary.json only (no report.html): for "
                        "batch runs")
    p.add_argument("--output-bag", action="store_true",
                   help="also write the estimates as the node's topics into DIR/estimates_bag")
    p.add_argument("--jobs", type=_positive_int, metavar="N",
                   help="parallel processes for several bags (default: one per core)")
    p.add_argument("--progress", action=argparse.BooleanOptionalAction, default=None,
                   help="progress bar on stderr (default: only on a terminal)")
    p.add_argument("--format", choices=("csv", "parquet"), default="csv", dest="file_format",
                   help="estimates file: csv (estimates.csv, default) or parquet "
                        "(estimates.parquet, the same columns)")
    fleet = p.add_argument_group(
        "several bags", "one task per bag, locally or on a Dask cluster; DIR/runs.json and "
        "DIR/fleet.html list every bag and those short of the limits below")
    fleet.add_argument("--cluster", metavar="ADDRESS",
                       help="Dask scheduler to run the bags on (e.g. tcp://host:8786; needs "
                            "the [fleet] extra; bags and DIR on storage every worker sees)")
    fleet.add_argument("--limit-force-rmse", type=_non_negative, metavar="N",
                       help="a bag falls short when its force RMSE in contact exceeds N newtons")
    fleet.add_argument("--limit-convergence-time", type=_non_negative, metavar="S",
                       help="a bag falls short when its parameters take longer than S seconds "
                            "after the first contact to converge (or never do)")
    fleet.add_argument("--limit-reject-share", type=_share, metavar="F",
                       help="a bag falls short when more than this share (0-1) of its joint "
                            "states are rejected")
    fleet.add_argument("--require-convergence", action="store_true",
                       help="a bag falls short when not all four parameters converged")


def _replay(args: argparse.Namespace) -> int:
    from .offline.replay import INPUT_ERRORS, ReplayRequest, replay, subdir_names
    common = dict(params=args.params, urdf=args.urdf, topics=tuple(args.topics),
                  reference_topic=args.reference_topic, output_bag=args.output_bag,
                  bag_settings=not args.ignore_bag_settings, file_format=args.file_format,
                  report=args.report)
    single = (len(args.bags) == 1 and args.cluster is None
              and not (args.bags[0].is_dir() and not (args.bags[0] / "metadata.yaml").exists())
              and not any(c in str(args.bags[0]) for c in "*?["))
    if single:
        try:
            result = replay(ReplayRequest(args.bags[0], args.out, progress=args.progress,
                                          **common))
        except INPUT_ERRORS as exc:
            raise UsageError(str(exc)) from None
        print(format_summary(result.summary))
        print(f"wrote {args.out}/estimates.{args.file_format}, summary.json"
              + (", report.html" if args.report else "")
              + (", estimates_bag" if args.output_bag else ""))
        return EXIT_OK
    from .offline.fleet import Thresholds, expand_bags, replay_fleet
    try:
        bags = expand_bags(args.bags)
    except INPUT_ERRORS as exc:
        raise UsageError(str(exc)) from None
    names = subdir_names(bags)
    requests = [ReplayRequest(b, args.out / n, progress=False, **common)
                for b, n in zip(bags, names)]
    jobs = args.jobs or min(len(requests), os.cpu_count() or 1)
    limits = Thresholds(args.limit_force_rmse, args.limit_convergence_time,
                        args.limit_reject_share, args.require_convergence)
    errors: list[str] = []
    try:
        failed, short = replay_fleet(requests, args.out, jobs, errors.append, args.cluster,
                                     limits)
    except INPUT_ERRORS as exc:
        raise UsageError(str(exc)) from None
    for line in errors:
        print(f"{PROG} replay: error: {line}", file=sys.stderr)
    shown = ", ".join(names[:10]) + (f", ... ({len(names) - 10} more)" if len(names) > 10
                                     else "")
    print(f"replayed {len(requests) - failed} of {len(requests)} bags into {args.out}/ "
          f"({shown}); {short} short of the limits; see {args.out}/fleet.html")
    return EXIT_USAGE if failed else EXIT_OK


def format_summary(summary: dict) -> str:
    """A short plain-text table of a summary (parameters, force RMSE, convergence)."""
    from .offline.report import display
    width = max(13, *(len(p) + 1 for p in summary["parameters"]))
    lines = [f"{'parameter':<{width}}{'estimate':>12}{'std':>11}{'truth':>11}"
             f"{'converged':>11}{'after (s)':>11}"]
    for p, e in summary["parameters"].items():
        lines.append(f"{p:<{width}}{display(e['final']):>12}{display(e['std']):>11}"
                     f"{display(e['truth']):>11}{display(e['converged']):>11}"
                     f"{display(e['time_to_convergence_s']):>11}")
    mech = summary.get("mechanism")
    if mech:
        axis = " ".join(f"{x:.4f}" for x in mech["axis"])
        text = f"{mech['kind']} geometry: {mech['geometry']}, axis ({axis})"
        if mech["kind"] == "revolute":
            point = " ".join(f"{x:.4f}" for x in mech["axis_point"])
            text += (f" through ({point}) m, radius {display(mech['radius_m'])} m, swept "
                     f"{display(mech['swept_arc_deg'])} deg")
            rot = mech["rotary"]
            text += "\nhinge: " + ", ".join(
                f"{name} {display(rot[name]['final'])} {rot[name]['unit']}" for name in rot)
        else:
            text += f", travel {display(mech['travel_m'])} m"
        if "axis_error_deg" in mech:
            text += f"\naxis error {display(mech['axis_error_deg'])} deg"
            if "radius_error" in mech:
                text += f", radius error {display(100 * mech['radius_error'])} %"
        lines.append(text)
    for prefix, entry in (summary.get("principal") or {}).items():
        lines.append(f"principal {prefix}: " + ", ".join(display(v) for v in entry["values"])
                     + (" (truth " + ", ".join(display(v) for v in entry["truth_values"]) + ")"
                        if "truth_values" in entry else ""))
    f = summary["force"]
    if f.get("reference"):
        lines.append(f"force RMSE {display(f['rmse_N'])} N after bias learning, "
                     f"{display(f['rmse_contact_N'])} N in contact ({f['reference']})")
    count = len(summary["parameters"])
    lines.append(f"all {'four' if count == 4 else count} converged: "
                 f"{display(summary['converged'])}"
                 + (f" (after {display(summary['time_to_convergence_s'])} s of contact)"
                    if summary["time_to_convergence_s"] is not None else ""))
    return "\n".join(lines)


# --------------------------------------------------------------------------------------------
# simulate


def _simulate_arguments(p: argparse.ArgumentParser) -> None:
    from .sim.simulator import SCENARIOS
    p.add_argument("scenario", metavar="SCENARIO", choices=sorted(SCENARIOS),
                   help="one of: " + ", ".join(sorted(SCENARIOS)))
    p.add_argument("--out", required=True, type=Path, metavar="BAG",
                   help="bag to write (a new path)")
    p.add_argument("--seed", type=_seed, default=0, help="noise and bias seed (default 0)")
    p.add_argument("--duration", type=_seconds, metavar="S",
                   help="length in s (default: the scenario's own)")
    p.add_argument("--rate", type=_hertz, default=1000.0, metavar="HZ",
                   help="joint-state rate in Hz (default 1000)")
    p.add_argument("--storage", choices=("mcap", "sqlite3"), default="mcap",
                   help="bag storage (default mcap)")
    p.add_argument("--effort-side", choices=("link", "motor"), default="link",
                   help="efforts from joint torque sensors (link) or motor currents (motor, "
                        "with friction)")


def _simulate(args: argparse.Namespace) -> int:
    from .io.ground_truth import BagError
    from .sim.recording import write_simulated_bag
    from .sim.simulator import SCENARIOS, simulate
    # refuse a bad target before spending the simulation time on it
    if args.out.exists():
        raise UsageError(f"output bag {str(args.out)!r} exists already; expected a new path")
    if not args.out.parent.is_dir():
        raise UsageError(f"cannot write bag {str(args.out)!r}: directory "
                         f"{str(args.out.parent)!r} does not exist")
    try:
        run = simulate(args.scenario, duration=args.duration, seed=args.seed, rate=args.rate,
                       effort_side=args.effort_side)
        write_simulated_bag(args.out, run, args.storage,
                            description=SCENARIOS[args.scenario].description)
    except (ValueError, BagError) as exc:
        raise UsageError(str(exc)) from None
    t = run.truth
    if not t.get("has_object", True):
        truth = "no object, no contact (free motion only: bias, friction and noise truth only)"
    elif "mass_matrix" in t:   # the cartesian model's truth: principal values (ascending)
        import numpy as np  # imported by the simulation already

        truth = "truth " + ", ".join(
            f"{label} {', '.join(f'{x:.4g}' for x in np.linalg.eigvalsh(t[key]))} {unit}"
            for label, key, unit in (("mass", "mass_matrix", "kg"),
                                     ("damping", "damping_matrix", "N·s/m"),
                                     ("stiffness", "stiffness_matrix", "N/m"))) + (
            f" (principal values), static force ({t['static_force_x']:.4g}, "
            f"{t['static_force_y']:.4g}, {t['static_force_z']:.4g}) N")
    else:
        truth = (f"truth mass {t['mass']:.4g} kg, damping {t['damping']:.4g} N·s/m, stiffness "
                 f"{t['stiffness']:.4g} N/m, static force {t['static_force']:.4g} N")
    print(f"wrote {args.out} ({args.storage}): scenario {args.scenario}, "
          f"{run.time[-1]:.1f} s at {args.rate:g} Hz, {len(run.time)} joint states; {truth}")
    return EXIT_OK


# --------------------------------------------------------------------------------------------

COMMANDS: tuple[Command, ...] = (
    Command("run", "run the ROS 2 node (arguments after 'run' go to it; --managed: a "
                   "lifecycle node)", _run_arguments,
            _run),
    Command("replay", "estimate offline from recorded bags: CSV, summary and report",
            _replay_arguments, _replay),
    Command("simulate", "write a built-in invented scenario as a bag with ground truth",
            _simulate_arguments, _simulate),
    Command("tune", "identify the robot's bias, friction and sensor noise from bags; write a "
            "parameter file",
            lambda p: _tune().add_arguments(p), lambda a: _tune().run(a)),
    Command("excitation", "write a commissioning motion (CSV and JointTrajectory YAML) that "
                          "excites the robot's dynamics within its URDF's limits",
            lambda p: _excitation().add_arguments(p), lambda a: _excitation().run(a)),
)


def _tune():
    from .offline import tune  # imported on use: it loads the whole pipeline
    return tune


def _excitation():
    from .offline import excitation  # imported on use
    return excitation


def build_parser(command: str | None = "*") -> argparse.ArgumentParser:
    """The parser. ``command``: the subcommand whose arguments are added (None: none, for the
    top-level help; ``"*"``: all). A subcommand's arguments may import what it needs (the
    scenario names, the tuning module), so only the one being run pays for them."""
    parser = argparse.ArgumentParser(
        prog=PROG, description="Sensorless interaction-force and object-parameter estimation.")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for cmd in COMMANDS:
        p = sub.add_parser(cmd.name, help=cmd.help, description=cmd.help)
        if command in ("*", cmd.name):
            cmd.add_arguments(p)
        p.set_defaults(_command=cmd)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if argv and argv[0] == "run":  # everything after 'run' belongs to the node, unparsed
        args = argparse.Namespace(command="run", ros_args=argv[1:], _command=COMMANDS[0])
    else:
        names = {c.name for c in COMMANDS}
        parser = build_parser(argv[0] if argv and argv[0] in names else None)
        args = parser.parse_args(argv)
    try:
        return args._command.run(args)
    except UsageError as exc:
        print(f"{PROG} {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print(f"{PROG} {args.command}: interrupted", file=sys.stderr)
        return 130


def entry() -> None:
    """The console script: :func:`main`, then the process ends without the interpreter's
    teardown for the offline commands. Measured on a 62 s replay (this machine, loaded):
    freeing the compiled code and the models at exit took 0.23-0.27 s after the files were
    written and closed. Output streams are flushed first; ``run`` (the node) ends normally."""
    argv = sys.argv[1:]
    code = main(argv)
    if argv and argv[0] in ("replay", "simulate", "tune", "excitation"):
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(code)
    sys.exit(code)


if __name__ == "__main__":
    entry()
