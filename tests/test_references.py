"""The project's table of outside values (tests/reference_values.py) is complete, and the
repository cites no file it does not contain."""

import math
import shutil
import subprocess
from pathlib import Path

import pytest

from reference_values import REFERENCE_VALUES, TAGS, Reference, value

ROOT = Path(__file__).resolve().parent.parent


def _numbers(v):
    return list(v) if isinstance(v, tuple) else [v]


@pytest.mark.parametrize("name", sorted(REFERENCE_VALUES))
def test_entry_has_value_unit_source_and_tag(name):
    entry = REFERENCE_VALUES[name]
    assert isinstance(entry, Reference)
    numbers = _numbers(entry.value)
    assert numbers, name
    for x in numbers:
        assert isinstance(x, (int, float)) and not isinstance(x, bool), (name, x)
        assert math.isfinite(x), (name, x)
    assert isinstance(entry.unit, str) and entry.unit.strip(), name
    # a source names where the number comes from, not just a tag
    assert isinstance(entry.source, str) and len(entry.source.strip()) >= 20, name
    assert entry.tag in TAGS, (name, entry.tag)
    assert value(name) == entry.value


def test_ranges_are_ordered():
    for name, entry in REFERENCE_VALUES.items():
        if name.endswith("_range") or name.startswith("time_scale_"):
            low, high = entry.value
            assert low < high, name


def test_primary_entries_cite_a_source_not_memory():
    for name, entry in REFERENCE_VALUES.items():
        if entry.tag == "primary":
            assert "from memory" not in entry.source, name


def test_unknown_name_is_a_key_error():
    with pytest.raises(KeyError):
        value("no_such_value")


def test_no_tracked_file_cites_an_outside_references_file():
    # the outside notes file may not be cited: every value it gave is in reference_values.py
    git = shutil.which("git")
    if git is None:
        pytest.skip("git is not installed")
    probe = subprocess.run([git, "rev-parse", "--is-inside-work-tree"], cwd=ROOT,
                           capture_output=True, text=True)
    if probe.returncode != 0:
        pytest.skip("not a git checkout")
    name = "REFERENCE" + "S.md"  # built here so that this file does not match itself
    found = subprocess.run([git, "grep", "-n", "-F", name], cwd=ROOT, capture_output=True,
                           text=True)
    assert found.returncode == 1, f"{name} is cited in tracked files:\n{found.stdout}"
    # also the bare upper-case name, as in a citation "[from memory; <name>]"
    bare = subprocess.run([git, "grep", "-n", "-w", "REFERENCE" + "S"], cwd=ROOT,
                          capture_output=True, text=True)
    assert bare.returncode == 1, f"an outside notes file is cited:\n{bare.stdout}"
