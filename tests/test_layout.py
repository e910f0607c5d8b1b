"""The layer subpackages: every exported name resolves, and 0.1's flat module names still import."""

import importlib
import sys
import warnings

import pytest

import crn
from crn._moved import MOVED, RENAMED, new_name
from crn.engines import ENGINES

LAYERS = ["crn", "crn.core", "crn.solvers", "crn.analyses", "crn.runtime", "crn.engines"]


@pytest.mark.parametrize("package", LAYERS)
def test_every_exported_name_resolves_to_its_defining_module(package):
    module = importlib.import_module(package)
    for name in module.__all__:
        value = getattr(module, name)
        home = getattr(value, "__module__", None)
        if home is not None and callable(value):
            assert home.startswith("crn."), (package, name, home)


def test_a_layer_does_not_export_a_name_that_shadows_one_of_its_modules():
    for package in LAYERS[1:]:
        module = importlib.import_module(package)
        for name in module.__all__:
            assert importlib.util.find_spec(f"{package}.{name}") is None, (package, name)


@pytest.mark.parametrize("old", sorted({*MOVED, *RENAMED}))
def test_old_flat_module_names_import_the_moved_module_with_a_warning(old):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        moved = importlib.import_module(f"crn.{old}")
    assert moved is importlib.import_module(new_name(old))
    assert any(issubclass(w.category, FutureWarning) and f"crn.{old}" in str(w.message)
               for w in caught)


def test_the_gillespy2_bridge_keeps_its_old_name_for_one_release():
    assert new_name("reference") == "crn.engines.gillespy2_bridge"
    assert new_name("simulate") == "crn.solvers.simulate"
    assert new_name("cli") is None
    sys.modules.pop("crn.reference", None)
    with pytest.warns(FutureWarning, match="crn.reference moved to crn.engines.gillespy2_bridge"):
        from crn.reference import run_reference
    assert run_reference is ENGINES["reference"].load()


def test_main_entry_points_are_exported_from_crn():
    for name in ["load_model", "protocol_to_network", "solve_mean_field", "simulate",
                 "exact_outcomes", "regime_map", "smallest_n", "verify", "implement"]:
        assert callable(getattr(crn, name))


def test_the_demo_model_ships_inside_the_package():
    # an installed wheel has no models/ folder: the demo must find its model under crn/
    import tomllib
    from pathlib import Path

    import crn.demo

    package = Path(crn.__file__).resolve().parent
    assert crn.demo.MODEL.resolve().is_relative_to(package)
    assert crn.demo.MODEL.is_file()
    data = tomllib.loads((package.parent / "pyproject.toml").read_text())
    assert "*.toml" in data["tool"]["setuptools"]["package-data"]["crn.data"]
