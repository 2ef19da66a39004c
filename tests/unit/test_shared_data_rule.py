"""What lives in ../shared (recordings, check values) skips in a user's clone and fails in CI.

``components.require_shared`` is what the ``shared_datasets`` and ``shared_references`` fixtures call;
these tests give it a path that does not exist, once as CI and once as a clone, and read the outcome.
"""

from __future__ import annotations

import pytest

import components


def test_present_path_is_returned(tmp_path):
    assert components.require_shared(tmp_path, "shared datasets", ci=True) == tmp_path


def test_missing_in_ci_fails_naming_what_and_where(tmp_path):
    absent = tmp_path / "shared" / "datasets"
    with pytest.raises(pytest.fail.Exception, match=r"shared datasets missing at .*shared/datasets: CI=true"):
        components.require_shared(absent, "shared datasets", ci=True)


def test_missing_in_a_clone_skips_with_the_reason(tmp_path):
    absent = tmp_path / "shared" / "datasets"
    with pytest.raises(pytest.skip.Exception, match=r"not present at .*shared/datasets \(a clone without"):
        components.require_shared(absent, "shared datasets", ci=False)


@pytest.mark.parametrize("value,fails", [("true", True), ("TRUE", True), ("", False), ("false", False)])
def test_the_ci_variable_decides(tmp_path, monkeypatch, value, fails):
    monkeypatch.setenv("CI", value)
    expected = pytest.fail.Exception if fails else pytest.skip.Exception
    with pytest.raises(expected):
        components.require_shared(tmp_path / "absent", "shared datasets")


def test_the_fixtures_go_through_the_rule():
    # the fixtures must not grow their own skip again: both hand their path to require_shared
    import conftest

    source = (components.REPO_ROOT / "tests" / "conftest.py").read_text(encoding="utf-8")
    for name in ("shared_datasets", "shared_references"):
        assert hasattr(conftest, name)
        body = source.split(f"def {name}()", 1)[1].split("\n\n", 1)[0]
        assert "components.require_shared(" in body, name
