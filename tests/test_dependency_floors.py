"""Dependency floors in pyproject.toml: every dependency has one, and this environment meets it.

The floors are the oldest releases studykit is known or believed to work with, not the newest
of each (a user's existing environment should be able to meet them); DEVELOPERS.md ("Dependency
floors") says which were tested in an environment at the floor and which were not. This test
checks that the floors are consistent with what is installed here: every declared dependency is
installed at a version its floor admits, and every runtime dependency has a floor.
"""

from __future__ import annotations

import importlib.metadata as md
import tomllib
from pathlib import Path

import pytest
from packaging.requirements import Requirement
from packaging.version import Version

ROOT = Path(__file__).resolve().parents[1]
PROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
RUNTIME = [Requirement(r) for r in PROJECT["dependencies"]]
DEV = [Requirement(r) for r in PROJECT["optional-dependencies"]["dev"]]


@pytest.mark.parametrize("req", RUNTIME + DEV, ids=str)
def test_installed_version_meets_the_floor(req):
    installed = Version(md.version(req.name))
    assert req.specifier.contains(installed, prereleases=True), (
        f"{req.name} {installed} is installed but pyproject.toml asks for {req.specifier}"
    )


@pytest.mark.parametrize("req", RUNTIME, ids=str)
def test_every_runtime_dependency_has_a_floor(req):
    floors = [s for s in req.specifier if s.operator == ">="]
    assert floors, f"{req.name}: give a lower bound (>=) that a user's environment can meet"
    assert not [s for s in req.specifier if s.operator in ("==", "<", "<=", "~=")], (
        f"{req.name}: no upper pins or exact versions in a library's requirements"
    )
