"""The launch file, checked without launch/launch_ros installed.

Checks: it compiles; its package/executable/node names match setup.py; the parameter file it
points at is installed by setup.py and validates; running ``generate_launch_description``
against recording stand-ins of the launch API wires the arguments into the Node.
(The node reading the file via ``--ros-args --params-file`` is tested with the node.)
"""

from __future__ import annotations

import ast
import importlib.util
import py_compile
import sys
import types
from pathlib import Path
from typing import Any

import pytest

from kinematic_monitor.config.files import load_params_file
from kinematic_monitor.config.schema import NODE_NAME
from kinematic_monitor.config.validation import validate

REPO = Path(__file__).resolve().parents[2]
LAUNCH_FILE = REPO / "launch" / "kinematic_monitor.launch.py"
SETUP_PY = REPO / "setup.py"


def _calls(tree: ast.AST, func_name: str) -> list[ast.Call]:
    return [n for n in ast.walk(tree) if isinstance(n, ast.Call)
            and isinstance(n.func, ast.Name) and n.func.id == func_name]


def _keywords(call: ast.Call) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for kw in call.keywords:
        try:
            out[str(kw.arg)] = ast.literal_eval(kw.value)
        except ValueError:
            out[str(kw.arg)] = kw.value
    return out


def _setup_facts() -> tuple[str, dict[str, str], list[tuple[str, list[str]]]]:
    """(package name, console scripts name -> target, data_files as source text) of setup.py."""
    tree = ast.parse(SETUP_PY.read_text())
    package = next(ast.literal_eval(n.value) for n in ast.walk(tree) if isinstance(n, ast.Assign)
                   and any(isinstance(t, ast.Name) and t.id == "package_name" for t in n.targets))
    setup_call = _calls(tree, "setup")[0]
    kws = {kw.arg: kw.value for kw in setup_call.keywords}
    entry_points = ast.literal_eval(kws["entry_points"])
    scripts: dict[str, str] = {}
    for line in entry_points["console_scripts"]:
        script, target = line.split("=", 1)
        scripts[script.strip()] = target.strip()
    data_files = [(ast.unparse(t.elts[0]), [ast.unparse(e) for e in ast.walk(t.elts[1])
                                            if isinstance(e, ast.Constant)])
                  for t in kws["data_files"].elts if isinstance(t, ast.Tuple)]  # type: ignore[attr-defined]
    return package, scripts, data_files


def test_launch_file_compiles(tmp_path: Path) -> None:
    py_compile.compile(str(LAUNCH_FILE), cfile=str(tmp_path / "launch.pyc"), doraise=True)


def test_node_names_match_setup_py() -> None:
    tree = ast.parse(LAUNCH_FILE.read_text())
    package, scripts, _ = _setup_facts()
    nodes = _calls(tree, "Node")
    assert len(nodes) == 1
    kw = _keywords(nodes[0])
    assert kw["package"] == package == "kinematic_monitor"
    assert kw["executable"] in scripts
    assert scripts[kw["executable"]] == "kinematic_monitor.ros.node:main"
    assert kw["name"] == NODE_NAME
    assert kw["output"] == "screen"


def test_launch_arguments_declared_and_used() -> None:
    tree = ast.parse(LAUNCH_FILE.read_text())
    declared = {ast.literal_eval(c.args[0]) for c in _calls(tree, "DeclareLaunchArgument")}
    used = {ast.literal_eval(c.args[0]) for c in _calls(tree, "LaunchConfiguration")}
    assert declared == used == {"params_file", "use_sim_time"}


def test_setup_installs_launch_and_config() -> None:
    package, _, data_files = _setup_facts()
    dests = {dest: srcs for dest, srcs in data_files}
    assert any("'/launch'" in d for d in dests) and any("'/config'" in d for d in dests)
    sources = " ".join(s for srcs in dests.values() for s in srcs)
    assert "'launch/*.launch.py'" in sources and "'config/*.yaml'" in sources


class _Recorder:
    """Stand-in for a launch API class: records its arguments."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        self.args = args
        self.kwargs = kwargs


def _stub_modules(share_dir: Path) -> dict[str, types.ModuleType]:
    names = {
        "launch": ["LaunchDescription"],
        "launch.actions": ["DeclareLaunchArgument"],
        "launch.substitutions": ["LaunchConfiguration"],
        "launch_ros": [],
        "launch_ros.actions": ["Node"],
        "launch_ros.parameter_descriptions": ["ParameterValue"],
        "ament_index_python": [],
        "ament_index_python.packages": [],
    }
    modules: dict[str, types.ModuleType] = {}
    for mod_name, classes in names.items():
        module = types.ModuleType(mod_name)
        for cls in classes:
            setattr(module, cls, type(cls, (_Recorder,), {}))
        modules[mod_name] = module

    def get_package_share_directory(package: str) -> str:
        assert package == "kinematic_monitor"
        return str(share_dir)

    modules["ament_index_python.packages"].get_package_share_directory = (  # type: ignore[attr-defined]
        get_package_share_directory
    )
    return modules


def test_generate_launch_description_wires_parameters(monkeypatch: pytest.MonkeyPatch) -> None:
    # setup.py installs config/*.yaml to share/kinematic_monitor/config, so the source tree
    # stands in for the share directory
    for name, module in _stub_modules(REPO).items():
        monkeypatch.setitem(sys.modules, name, module)
    spec = importlib.util.spec_from_file_location("km_launch", LAUNCH_FILE)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    description = module.generate_launch_description()
    entities = description.args[0]
    args = {e.args[0]: e.kwargs for e in entities if type(e).__name__ == "DeclareLaunchArgument"}
    (node,) = [e for e in entities if type(e).__name__ == "Node"]

    default_params = Path(args["params_file"]["default_value"])
    assert default_params == REPO / "config" / "kinematic_monitor.yaml"
    cfg = validate(load_params_file(default_params))
    assert cfg.vehicle.wheelbase > 0
    assert args["use_sim_time"]["default_value"] == "false"

    params = node.kwargs["parameters"]
    assert type(params[0]).__name__ == "LaunchConfiguration" and params[0].args == ("params_file",)
    sim_time = params[1]["use_sim_time"]
    assert sim_time.kwargs["value_type"] is bool
    assert sim_time.args[0].args == ("use_sim_time",)
    assert node.kwargs["name"] == NODE_NAME
