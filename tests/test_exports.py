"""Every name a package lists in ``__all__`` resolves (STYLE.md: explicit, complete __all__)."""

import importlib

import pytest


@pytest.mark.parametrize("package", ["echoreo.sim", "echoreo.adapters", "echoreo.runner",
                                     "echoreo.scoring"])
def test_all_names_resolve(package):
    mod = importlib.import_module(package)
    missing = [name for name in mod.__all__ if not hasattr(mod, name)]
    assert missing == []
