"""Every name a package lists in ``__all__`` resolves (STYLE.md: explicit, complete __all__)."""

import importlib

import pytest


@pytest.mark.parametrize("package", ["echoreo.sim", "echoreo.adapters", "echoreo.runner",
                                     "echoreo.scoring"])
def test_all_names_resolve(package):
    mod = importlib.import_module(package)
    missing = [name for name in mod.__all__ if not hasattr(mod, name)]
    assert missing == []


@pytest.mark.parametrize("package", ["echoreo.sim", "echoreo.adapters", "echoreo.runner",
                                     "echoreo.scoring"])
def test_no_export_shares_a_submodule_name(package):
    """An exported name equal to a submodule's name would be replaced by the module
    object as soon as that submodule is imported (Python's import system sets it)."""
    import pkgutil

    mod = importlib.import_module(package)
    submodules = {info.name for info in pkgutil.iter_modules(mod.__path__)}
    assert sorted(set(mod.__all__) & submodules) == []
