"""Every public name of confpop resolves (run as other modules add names)."""

import importlib

import pytest

import confpop


@pytest.mark.parametrize("name", sorted(confpop.__all__))
def test_public_name_resolves(name):
    value = getattr(confpop, name)
    assert value is not None
    if name != "__version__":
        module = importlib.import_module(f"confpop.{confpop._PUBLIC[name]}")
        assert getattr(module, name) is value
        # the defining module lists it in its own __all__ too
        assert name in getattr(module, "__all__", [name])


def test_all_is_sorted_unique_and_matches_registry():
    names = [n for n in confpop.__all__ if n != "__version__"]
    assert len(names) == len(set(names))
    assert set(names) == set(confpop._PUBLIC)
    assert "__version__" in confpop.__all__
    assert isinstance(confpop.__version__, str) and confpop.__version__


def test_unknown_name_raises_attribute_error():
    with pytest.raises(AttributeError, match="has no attribute 'no_such_name'"):
        confpop.no_such_name  # noqa: B018


def test_dir_lists_public_names():
    listed = dir(confpop)
    for name in confpop._PUBLIC:
        assert name in listed
