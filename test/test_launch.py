"""The launch file, checked by parsing it against what it names (launch_ros has no wheels).

References: setup.py (package name, console scripts, installed data files), package.xml, the
files in config/, the node's topic names and the settings registry. Running
generate_launch_description() needs launch_ros and the installed package: only there.
"""
from __future__ import annotations

import ast
import fnmatch
import importlib
from pathlib import Path

import pytest

from interaction_estimator.core.settings import NODE_NAME, SPEC_BY_NAME
from interaction_estimator.io.parameter_file import load_parameter_file
from interaction_estimator.ros import node as estimator_node
from interaction_estimator.ros.topics import INPUT_TOPICS

REPO = Path(__file__).resolve().parents[1]
LAUNCH = REPO / "launch" / "interaction_estimator.launch.py"


def module_constants(tree: ast.Module) -> dict[str, object]:
    out = {}
    for stmt in tree.body:
        if isinstance(stmt, ast.Assign) and len(stmt.targets) == 1 and isinstance(
                stmt.targets[0], ast.Name):
            try:
                out[stmt.targets[0].id] = ast.literal_eval(stmt.value)
            except ValueError:
                pass
    return out


def evaluate(node: ast.AST, names: dict[str, object]):
    """Literal values, module constants, f-strings and glob("pattern") (-> the pattern)."""
    if isinstance(node, ast.Name):
        return names[node.id]
    if isinstance(node, ast.JoinedStr):
        return "".join(str(evaluate(v.value, names)) if isinstance(v, ast.FormattedValue)
                       else v.value for v in node.values)
    if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id == "glob":
        return ("glob", evaluate(node.args[0], names))
    if isinstance(node, (ast.List, ast.Tuple)):
        return [evaluate(e, names) for e in node.elts]
    if isinstance(node, ast.Dict):
        return {evaluate(k, names): evaluate(v, names) for k, v in zip(node.keys, node.values)}
    return ast.literal_eval(node)


@pytest.fixture(scope="module")
def setup_py():
    """What setup.py declares: name, console scripts, data files (from its syntax tree)."""
    tree = ast.parse((REPO / "setup.py").read_text())
    names = module_constants(tree)
    call = next(n for n in ast.walk(tree) if isinstance(n, ast.Call)
                and getattr(n.func, "id", "") == "setup")
    kw = {k.arg: k.value for k in call.keywords}
    scripts = {}
    for entry in evaluate(kw["entry_points"], names)["console_scripts"]:
        script, target = (p.strip() for p in entry.split("="))
        scripts[script] = target
    data_files = [tuple(x) for x in evaluate(kw["data_files"], names)]
    return {"name": evaluate(kw["name"], names), "scripts": scripts, "data_files": data_files}


@pytest.fixture(scope="module")
def launch_tree():
    return ast.parse(LAUNCH.read_text())


def installed(data_files, relative: str, package: str) -> bool:
    """True when setup.py's data_files install the repo file ``relative`` into share/."""
    folder, _, name = relative.rpartition("/")
    for dest, sources in data_files:
        if dest != f"share/{package}/{folder}":
            continue
        for src in sources:
            pattern = src[1] if isinstance(src, tuple) else src
            if fnmatch.fnmatch(relative, pattern):
                return True
    return False


def generate_function(tree: ast.Module) -> ast.FunctionDef:
    return next(n for n in tree.body if isinstance(n, ast.FunctionDef)
                and n.name == "generate_launch_description")


def calls(tree: ast.AST, name: str) -> list[ast.Call]:
    return [n for n in ast.walk(tree) if isinstance(n, ast.Call)
            and getattr(n.func, "id", getattr(n.func, "attr", "")) == name]


def test_launch_imports_stay_inside_the_function(launch_tree):
    # reference: the launch system is absent here; importing the file must not need it
    top = [n for n in launch_tree.body if isinstance(n, (ast.Import, ast.ImportFrom))]
    assert top == []
    inner = {n.module if isinstance(n, ast.ImportFrom) else n.names[0].name
             for n in ast.walk(generate_function(launch_tree))
             if isinstance(n, (ast.Import, ast.ImportFrom))}
    assert {"launch", "launch_ros.actions", "launch_ros.substitutions"} <= inner


def test_package_executable_and_node_name_exist(launch_tree, setup_py):
    consts = module_constants(launch_tree)
    # reference: setup.py's name and console scripts, package.xml, the settings registry
    assert consts["PACKAGE"] == setup_py["name"]
    package_xml = (REPO / "package.xml").read_text()
    assert f"<name>{consts['PACKAGE']}</name>" in package_xml
    target = setup_py["scripts"][consts["EXECUTABLE"]]
    module, func = target.split(":")
    assert callable(getattr(importlib.import_module(module), func))
    assert consts["NODE_NAME"] == NODE_NAME
    common = next(n for n in ast.walk(generate_function(launch_tree)) if isinstance(n, ast.Assign)
                  and getattr(n.targets[0], "id", "") == "common")
    kw = {k.arg: k.value for k in common.value.keywords}
    assert {kw["package"].id, kw["executable"].id, kw["name"].id} == {
        "PACKAGE", "EXECUTABLE", "NODE_NAME"}
    nodes = calls(generate_function(launch_tree), "Node")
    assert len(nodes) == 2 and all(any(k.arg is None and k.value.id == "common"
                                       for k in n.keywords) for n in nodes)


def test_parameter_file_exists_is_installed_and_loads(launch_tree, setup_py):
    consts = module_constants(launch_tree)
    relative = "/".join(consts["DEFAULT_PARAMS"])
    assert (REPO / relative).is_file()
    # reference: setup.py's data_files glob installs it where the launch file looks for it
    assert installed(setup_py["data_files"], relative, setup_py["name"])
    assert installed(setup_py["data_files"], "launch/" + LAUNCH.name, setup_py["name"])
    load_parameter_file(REPO / relative)  # reference: the package's own file reader
    # parameters written in the launch file itself must be settings
    for d in (n for n in ast.walk(generate_function(launch_tree)) if isinstance(n, ast.Dict)):
        for key in d.keys:
            assert ast.literal_eval(key) in SPEC_BY_NAME


def test_remappings_name_node_topics_and_declared_arguments(launch_tree):
    fn = generate_function(launch_tree)
    declared = {ast.literal_eval(c.args[0]) for c in calls(fn, "DeclareLaunchArgument")}
    used = {ast.literal_eval(c.args[0]) for c in calls(fn, "LaunchConfiguration")}
    assert used <= declared, used - declared  # every configuration used is declared
    assert declared <= used, declared - used  # and every argument declared is used
    remap = next(n for n in ast.walk(fn) if isinstance(n, ast.Assign)
                 and getattr(n.targets[0], "id", "") == "remappings")
    sources = [ast.literal_eval(t.elts[0]) for t in remap.value.elts]
    # reference: the topic names the node subscribes to (its own constants, used over DDS in
    # test_node.py)
    assert sorted(sources) == sorted(INPUT_TOPICS)


def test_generate_launch_description_where_launch_ros_exists():
    pytest.importorskip("launch_ros")
    # building the description needs no ament index: the package share is a substitution,
    # resolved only when launched
    spec = importlib.util.spec_from_file_location("launch_file", LAUNCH)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    description = mod.generate_launch_description()
    from launch.actions import DeclareLaunchArgument
    args = [e.name for e in description.entities if isinstance(e, DeclareLaunchArgument)]
    assert "params_file" in args and "namespace" in args


def test_managed_argument_reaches_the_node_as_a_flag_it_accepts(launch_tree):
    """The launch argument ``managed`` becomes the node's ``--managed=<value>`` argument;
    reference: the node's own argument reader (ros/node.py managed_flag), which the console
    script estimator_node runs."""
    fn = generate_function(launch_tree)
    declared = {ast.literal_eval(c.args[0]): c for c in calls(fn, "DeclareLaunchArgument")}
    default = next(k.value.value for k in declared["managed"].keywords
                   if k.arg == "default_value")
    assert default == "false"
    common = next(n for n in ast.walk(fn) if isinstance(n, ast.Assign)
                  and getattr(n.targets[0], "id", "") == "common")
    arguments = next(k.value for k in common.value.keywords if k.arg == "arguments")
    first = arguments.elts[0]   # ["--managed=", LaunchConfiguration("managed")]
    assert ast.literal_eval(first.elts[0]) == "--managed="
    assert ast.literal_eval(first.elts[1].args[0]) == "managed"
    assert ast.literal_eval(arguments.elts[1]) == "--ros-args"  # before the ROS arguments
    for value, managed in (("false", False), ("true", True), ("True", True)):
        assert estimator_node.managed_flag([f"--managed={value}"]) == (managed, [])
    assert estimator_node.managed_flag(["--managed"]) == (True, [])
    assert estimator_node.managed_flag([]) == (False, [])
    assert estimator_node.managed_flag(["--managed=maybe"]) == (None, ["--managed=maybe"])
