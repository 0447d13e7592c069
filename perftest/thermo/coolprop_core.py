"""Loading CoolProp's compiled core without the package's start-up work.

Every use of CoolProp by :mod:`perftest.thermo` goes through :func:`_coolprop` (and
:func:`_ha_props_si` for humid air), so that IF97 water never pays for CoolProp's
Helmholtz-energy fluid library.
"""

from __future__ import annotations

import importlib
import importlib.util
import sys
import threading

__all__ = ["_coolprop", "_ha_props_si"]

# ``import CoolProp`` runs CoolProp/__init__.py, which asks the library for its list of
# fluids; that loads every Helmholtz-energy (HEOS) fluid, 5-7 s of CPU time, although
# IF97 water needs none of them.  The compiled core ``CoolProp.CoolProp`` holds
# everything used here (AbstractState, the input-pair and parameter constants, PropsSI,
# HAPropsSI, the global parameter strings) and loads in ~0.01 s on its own.
#
# _coolprop() imports the core under its real name while a bare package object (built
# from the package's own spec, __init__.py not executed) stands in for ``CoolProp`` in
# sys.modules.  The stand-in is removed at once; the core stays registered as
# ``CoolProp.CoolProp``.  A later ``import CoolProp`` (user code, tests, other modules)
# therefore runs the real __init__.py, which finds and re-uses that same core module:
# one extension module, one set of classes, one fluid library.  HEOS fluids, humid air
# and fluid_names() load the fluid library inside CoolProp when first used.  The global
# import lock is held while the stand-in is visible so that no other thread can import
# ``CoolProp`` and see it.  Any failure falls back to the plain import.
_CORE = None
_CORE_LOCK = threading.Lock()


def _coolprop():
    """Return CoolProp's compiled core module ``CoolProp.CoolProp`` (loaded once)."""
    global _CORE
    if _CORE is None:
        with _CORE_LOCK:
            if _CORE is None:
                _CORE = _load_coolprop_core()
    return _CORE


def _load_coolprop_core():
    name, parent = "CoolProp.CoolProp", "CoolProp"
    core = sys.modules.get(name)
    if core is not None:
        return core
    if parent in sys.modules:  # the package is imported already: nothing to save
        return importlib.import_module(name)
    import _imp

    core = None
    _imp.acquire_lock()
    try:
        if parent not in sys.modules and name not in sys.modules:
            spec = importlib.util.find_spec(parent)
            if spec is not None and spec.submodule_search_locations is not None:
                stand_in = importlib.util.module_from_spec(spec)
                sys.modules[parent] = stand_in
                try:
                    core = importlib.import_module(name)
                except Exception:
                    sys.modules.pop(name, None)
                    core = None
                finally:
                    if sys.modules.get(parent) is stand_in:
                        del sys.modules[parent]
    finally:
        _imp.release_lock()
    if core is None or not hasattr(core, "AbstractState"):
        core = importlib.import_module(name)  # plain import: pays the full start-up
    return core


def _ha_props_si():
    """CoolProp's ``HAPropsSI`` (in the core for CoolProp 8, a submodule before)."""
    core = _coolprop()
    func = getattr(core, "HAPropsSI", None)
    if func is None:
        from CoolProp.HumidAirProp import HAPropsSI as func
    return func
