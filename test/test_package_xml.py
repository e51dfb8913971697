"""package.xml is a valid package format 3 manifest (REP 149) that agrees with setup.py.

The format 3 XML schema (package_format3.xsd) is not shipped by any package in the
registries this project uses (looked for in catkin-pkg, ament-package, ament-xmllint,
colcon-lint, bloom, rosdistro and Debian's catkin packages), so the schema file itself is
not applied here. The manifest is checked instead with catkin_pkg, the REP 149 parser that
colcon-ros itself uses to read package.xml: parsing with no warnings (unknown elements are
refused, doubtful content warns) and ``Package.validate()`` (name, version, maintainer e-mail,
licence and dependency rules of REP 149). The two negative cases show the checker refuses
what it should.
"""

from __future__ import annotations

import ast
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from kinematic_monitor import __version__

catkin_package = pytest.importorskip("catkin_pkg.package")

REPO = Path(__file__).resolve().parents[1]
MANIFEST = REPO / "package.xml"
# REP 149: the schema location given in a format 3 manifest's xml-model instruction
FORMAT3_XSD = "http://download.ros.org/schema/package_format3.xsd"


def _setup_assignments() -> dict[str, object]:
    tree = ast.parse((REPO / "setup.py").read_text())
    out: dict[str, object] = {}
    for node in tree.body:
        if isinstance(node, ast.Assign) and isinstance(node.targets[0], ast.Name):
            try:
                out[node.targets[0].id] = ast.literal_eval(node.value)
            except ValueError:
                pass
    return out


def test_format_3_manifest_parses_and_validates_without_warnings() -> None:
    warnings: list[str] = []
    pkg = catkin_package.parse_package(str(REPO), warnings=warnings)
    pkg.validate(warnings=warnings)
    assert warnings == []
    assert pkg.package_format == 3
    assert [e.content for e in pkg.exports if e.tagname == "build_type"] == ["ament_python"]


def test_manifest_names_the_format_3_schema() -> None:
    text = MANIFEST.read_text()
    assert f'<?xml-model href="{FORMAT3_XSD}"' in text
    assert ET.fromstring(text.split("?>", 2)[-1]).get("format") == "3"


def test_manifest_agrees_with_setup_py() -> None:
    pkg = catkin_package.parse_package(str(REPO))
    facts = _setup_assignments()
    assert pkg.name == facts["package_name"]
    assert pkg.version == __version__
    # every ROS package the node imports is a run dependency (the rmw is chosen at run time)
    wanted = {p.replace("-", "_") for p in facts["ROS_PACKAGES"]  # type: ignore[attr-defined]
              if not p.startswith("rmw")}
    assert wanted <= {d.name for d in pkg.exec_depends}


def _broken_copy(tmp_path: Path, old: str, new: str) -> Path:
    folder = tmp_path / "pkg"
    folder.mkdir()
    shutil.copy(MANIFEST, folder / "package.xml")
    text = (folder / "package.xml").read_text()
    assert old in text
    (folder / "package.xml").write_text(text.replace(old, new))
    return folder


def test_checker_refuses_a_maintainer_without_email(tmp_path: Path) -> None:
    folder = _broken_copy(tmp_path, 'email="kinematic-monitor@example.invalid"', "")
    with pytest.raises(catkin_package.InvalidPackage):
        catkin_package.parse_package(str(folder))


def test_checker_refuses_an_unknown_element(tmp_path: Path) -> None:
    folder = _broken_copy(tmp_path, "<license>", "<colour>red</colour>\n  <license>")
    with pytest.raises(catkin_package.InvalidPackage, match="colour"):
        catkin_package.parse_package(str(folder))
