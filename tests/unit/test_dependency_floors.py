"""The dependency floors in pyproject.toml, the lowest-versions constraints and the deployment lock agree.

``tests/constraints-lowest.txt`` is what CI installs to run the suite at the floors, so each of its pins
must be the floor itself; ``deploy/requirements.lock`` is what a box installs, so each pin must be allowed
by pyproject.toml and every runtime dependency must be pinned there.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

from packaging.requirements import Requirement
from packaging.utils import canonicalize_name
from packaging.version import Version

REPO = Path(__file__).resolve().parents[2]


def _project() -> dict:
    return tomllib.loads((REPO / "pyproject.toml").read_text(encoding="utf-8"))["project"]


def _requirements(lines: list[str]) -> dict[str, Requirement]:
    reqs = (Requirement(line) for line in lines)
    return {canonicalize_name(r.name): r for r in reqs}


def _pins(path: Path) -> dict[str, str]:
    pins = {}
    for raw in path.read_text(encoding="utf-8").splitlines():
        line = raw.split("#", 1)[0].strip()
        if line:
            name, _, version = line.partition("==")
            assert version, f"{path.name}: {raw!r} is not name==version"
            pins[canonicalize_name(name)] = version
    return pins


def _floor(req: Requirement) -> str | None:
    floors = [s.version for s in req.specifier if s.operator == ">="]
    return floors[0] if len(floors) == 1 else None


def test_lowest_constraints_are_the_floors():
    project = _project()
    declared = _requirements(project["dependencies"] + project["optional-dependencies"]["test"])
    floors = {name: Version(f) for name, r in declared.items() if (f := _floor(r)) is not None}
    lowest = {name: Version(v) for name, v in _pins(REPO / "tests" / "constraints-lowest.txt").items()}
    assert lowest == floors  # as releases: "1.26" and "1.26.0" are equal


def test_deployment_lock_pins_every_runtime_dependency_within_its_range():
    runtime = _requirements(_project()["dependencies"])
    lock = _pins(REPO / "deploy" / "requirements.lock")
    missing = sorted(set(runtime) - set(lock))
    assert missing == []
    outside = {n: lock[n] for n, r in runtime.items() if not r.specifier.contains(lock[n])}
    assert outside == {}


def test_the_installed_versions_have_the_interfaces_the_floors_are_set_by():
    # Run at the floors (CI's lowest-versions pass), this shows each named interface exists there;
    # one version below, it does not (checked when the floors were set: scipy 1.14.0 has no
    # signal.freqz_sos; paho-mqtt before 2.0 has no CallbackAPIVersion).
    import paho.mqtt.client
    import scipy.fft
    import scipy.signal

    assert callable(scipy.signal.freqz_sos)
    assert callable(scipy.fft.prev_fast_len)
    assert paho.mqtt.client.CallbackAPIVersion.VERSION2
