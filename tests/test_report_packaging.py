"""The templates ship inside the package, and the explicit package list in pyproject.toml is complete."""

from __future__ import annotations

import tomllib
from pathlib import Path

from studylog import report

ROOT = Path(__file__).resolve().parents[1]


def test_every_package_under_src_is_listed_for_the_wheel() -> None:
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]
    listed = set(config["packages"])
    found = {
        ".".join(path.parent.relative_to(ROOT / "src").parts)
        for path in (ROOT / "src").rglob("__init__.py")
    }
    missing = found - listed
    assert not missing, f"add these packages to [tool.setuptools] packages in pyproject.toml: {missing}"
    assert config["package-dir"]["studylog.templates"] == "templates"
    assert set(config["package-data"]["studylog.templates"]) == {"*.md.j2", "*.html.j2"}


def test_the_installed_templates_are_the_top_level_folder() -> None:
    shipped = report.templates_folder()
    ours = {p.name for p in (ROOT / "templates").glob("*.j2")}
    assert ours == {p.name for p in shipped.glob("*.j2")}
    for document in report.DOCUMENTS:
        for fmt in report.FORMATS:
            assert f"{document}.{fmt}.j2" in ours
