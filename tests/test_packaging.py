"""Packaging: one version source, the licence, and the demo files shipped as package data.

The demo protocol and the synthetic demo table live in runs/; gpe/demo/ holds links to them,
so that they are package data (a wheel stores the files themselves) without a second copy. The wheel itself is built and
installed outside the checkout by .ci/run.
"""

import tomllib
from importlib import resources
from pathlib import Path

import pytest

import gpe
import thermo
from gpe.cli.main import main

ROOT = Path(__file__).resolve().parents[1]
DEMO_FILES = ("demo.toml", "demo_measured.csv", "demo_measured.toml")


def _pyproject() -> dict:
    return tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))


def test_one_version_from_the_installed_metadata(capsys):
    version = _pyproject()["project"]["version"]
    assert gpe.__version__ == thermo.__version__ == version
    with pytest.raises(SystemExit) as exit_info:
        main(["--version"])
    assert exit_info.value.code == 0
    assert capsys.readouterr().out.strip() == f"vortherm {version}"


def test_licence_file_matches_the_declared_licence():
    declared = _pyproject()["project"]["license"]
    text = (ROOT / "LICENSE").read_text(encoding="utf-8")
    assert declared == "MIT" and text.startswith("MIT License")
    assert "the vortherm developers" in text
    assert _pyproject()["project"]["license-files"] == ["LICENSE"]


@pytest.mark.parametrize("name", DEMO_FILES)
def test_demo_files_are_package_data_and_runs_shows_the_same_bytes(name):
    packaged = resources.files("gpe").joinpath("demo", name)
    assert packaged.is_file()
    # one source of truth: gpe/demo/<name> links to runs/<name> (were it a copy, the same bytes)
    assert (ROOT / "runs" / name).read_bytes() == packaged.read_bytes()
    data = _pyproject()["tool"]["setuptools"]["package-data"]["gpe"]
    assert any(Path("demo", name).match(pattern) for pattern in data)
