"""Discovery of submodels and fuels through pluggy entry points.

One registry, one lookup: everything that maps a name from a config to a
class goes through :func:`submodel_class`.
"""

from __future__ import annotations

import functools
import importlib
import importlib.util
import os
import pathlib
from typing import Iterable

import pluggy

import cyclesim.hookspecs as hookspecs
from .errors import PluginError
from .params import suggestion
from .roles import ROLE_BASES, ROLES, Submodel

ENTRY_POINT_GROUP = "cyclesim"


def get_plugin_manager(extra_modules: Iterable[str] = ()) -> pluggy.PluginManager:
    """Build a plug-in manager: hook specs, installed entry points, then explicit modules.

    ``extra_modules`` are import names (or ``path/to/file.py``) the user listed
    explicitly (config ``plugins:`` or ``--plugin``); nothing else is loaded.
    A plug-in is code that runs with the user's rights.
    """
    pm = pluggy.PluginManager("cyclesim")
    pm.add_hookspecs(hookspecs)
    _load_entry_points(pm)
    for mod in extra_modules:
        module = _import_module(mod)
        pm.register(module)
        _check_hooks(pm, module, f"plugin {mod!r}")
    pm.check_pending()
    return pm


def _load_entry_points(pm: pluggy.PluginManager) -> None:
    """Register every installed ``cyclesim`` entry point; one that fails to import is named.

    (pluggy's ``load_setuptools_entrypoints`` does the same, but its error names neither the
    entry point nor its package.)
    """
    from importlib.metadata import entry_points

    for ep in entry_points(group=ENTRY_POINT_GROUP):
        if pm.get_plugin(ep.name) is not None or pm.is_blocked(ep.name):
            continue
        dist = getattr(getattr(ep, "dist", None), "name", None) or "its package"
        _note_module(ep.module, f"installed plug-in {ep.name!r} ({ep.value}, from {dist})")
        try:
            plugin = ep.load()
        except Exception as exc:  # noqa: BLE001 - reported as one line
            raise PluginError(
                f"installed plug-in {ep.name!r} ({ep.value}, from {dist}) failed to import"
                f" ({type(exc).__name__}: {exc}); fix it or `pip uninstall {dist}`"
            ) from exc
        pm.register(plugin, name=ep.name)
        _check_hooks(pm, plugin, f"installed plug-in {ep.name!r} ({ep.value}, from {dist})")


def _check_hooks(pm: pluggy.PluginManager, plugin, what: str) -> None:
    """Say (stderr) when a plug-in module implements no hook: usually a missing ``@hookimpl``."""
    if not pm.get_hookcallers(plugin):
        import sys

        print(f"cyclesim: {what} implements no cyclesim hook (is `@hookimpl` missing on"
              f" cyclesim_register_submodels?)", file=sys.stderr)


def _import_module(spec: str):
    try:
        if spec.endswith(".py"):
            path = pathlib.Path(spec).expanduser().resolve()
            mspec = importlib.util.spec_from_file_location(f"cyclesim_user_{path.stem}", path)
            if mspec is None or not path.exists():
                raise FileNotFoundError(spec)
            _note_source(str(path), f"plugin {spec!r}")
            module = importlib.util.module_from_spec(mspec)
            mspec.loader.exec_module(module)  # type: ignore[union-attr]
            return module
        _note_module(spec, f"plugin {spec!r}")
        return importlib.import_module(spec)
    except Exception as exc:  # noqa: BLE001 - reported as one line
        raise PluginError(f"plugin {spec!r}: could not be loaded ({type(exc).__name__}: {exc})") from exc


# --------------------------------------------------------------------------
# Where plug-in code lives: a failure raised from it is that plug-in's
# --------------------------------------------------------------------------

_SOURCES: dict[str, str] = {}
"""Real path of a plug-in's file, or of its package folder (ending in the separator), -> label."""


def _note_source(path: str, label: str) -> None:
    _SOURCES.setdefault(os.path.realpath(path), label)


def _note_module(name: str, label: str) -> None:
    """Note the file of an importable module (its folder for a package) before it is imported."""
    try:
        mspec = importlib.util.find_spec(name)
    except (ImportError, ValueError):
        return
    origin = getattr(mspec, "origin", None)
    if not origin or not os.path.isfile(origin):
        return
    if mspec.submodule_search_locations:        # a package: every file in its folder
        _note_source(os.path.dirname(origin) + os.sep, label)
    else:
        _note_source(origin, label)


def _plugin_of(filename: str) -> str | None:
    f = os.path.realpath(filename)
    if f in _SOURCES:
        return _SOURCES[f]
    for src, label in _SOURCES.items():
        if src.endswith(os.sep) and f.startswith(src):
            return label
    return None


def plugin_failure(exc: BaseException) -> str | None:
    """One line naming the plug-in whose code raised ``exc``, its file and line, or None.

    Any exception counts, ``SystemExit`` and ``KeyboardInterrupt`` included: a plug-in that
    raises either is reported as that plug-in's failure rather than ending the run as if it had
    finished or been interrupted.  The innermost frame in a plug-in's file is named.
    """
    import traceback

    frames = traceback.extract_tb(exc.__traceback__)
    hit = None
    for fr in frames:
        label = _plugin_of(fr.filename)
        if label is not None:
            hit = (label, fr)
    if hit is None:
        return None
    label, fr = hit
    what = f"{type(exc).__name__}({', '.join(repr(a) for a in exc.args)})" if exc.args else type(exc).__name__
    return (f"{label} failed: raised {what} in {fr.name} ({os.path.basename(fr.filename)}:{fr.lineno});"
            " a plug-in's exception of any kind is its failure")


class Registry:
    """Submodel classes by role and name, built from the plug-in manager."""

    def __init__(self, pm: pluggy.PluginManager):
        self.pm = pm
        self.submodels: dict[str, dict[str, type[Submodel]]] = {r: {} for r in ROLES}
        for batch in pm.hook.cyclesim_register_submodels():
            for cls in batch or ():
                self._add(cls)
        self.fuels = {}
        for batch in pm.hook.cyclesim_register_fuels():
            for fuel in batch or ():
                if fuel.name in self.fuels:
                    raise PluginError(f"fuel {fuel.name!r} is registered twice")
                self.fuels[fuel.name] = fuel

    def _add(self, cls) -> None:
        role = getattr(cls, "role", None)
        name = getattr(cls, "name", None)
        if role not in ROLE_BASES or not isinstance(cls, type) or not issubclass(cls, ROLE_BASES[role]):
            raise PluginError(
                f"plugin class {cls!r}: must subclass one of the role bases in cyclesim.roles"
                f" (role {role!r})"
            )
        if not name:
            raise PluginError(f"plugin class {cls.__qualname__}: declares no name")
        base = ROLE_BASES[role]
        for alternatives in base.required_methods:
            if all(getattr(cls, m) is getattr(base, m) for m in alternatives):
                raise PluginError(
                    f"{role} model {name!r} ({cls.__module__}.{cls.__qualname__}) defines no "
                    + " or ".join(f"{m}()" for m in alternatives) + f", which a {base.__name__} must"
                )
        if name in self.submodels[role]:
            other = self.submodels[role][name]
            raise PluginError(
                f"submodel {role}.{name} is registered twice ({other.__module__} and {cls.__module__})"
            )
        self.submodels[role][name] = cls
        for v in vars(cls).values():           # its methods' files, wherever the class came from
            code = getattr(v, "__code__", None)
            if code is not None and os.path.isfile(code.co_filename) and _plugin_of(code.co_filename) is None:
                _note_source(code.co_filename, f"plug-in module {cls.__module__!r}")

    def submodel_class(self, role: str, name: str, where: str | None = None) -> type[Submodel]:
        """Look up a submodel class; unknown names get a close-spelling suggestion."""
        table = self.submodels.get(role, {})
        if name not in table:
            key = where or f"{role}.model"
            raise PluginError(
                f"{key} = {name!r}: unknown {role} model" + suggestion(str(name), table)
                + f"; installed: {', '.join(sorted(table)) or '(none)'}"
            )
        return table[name]


def spark_param(case, what: str) -> str:
    """The parameter that sets the spark timing of ``case``'s burn model (its role contract,
    ``BurnRate.spark_param``) [deg before firing TDC]; a ConfigError naming ``what`` where the
    model declares none."""
    from .errors import ConfigError

    ch = case.submodels["burn"]
    name = get_registry(tuple(case.plugins)).submodel_class("burn", ch.model).spark_param
    if not name:
        raise ConfigError(f"{what}: burn.model = {ch.model!r} is not timed by a spark parameter"
                          " (its spark_param is not set)")
    return name


@functools.lru_cache(maxsize=8)
def get_registry(extra_modules: tuple[str, ...] = ()) -> Registry:
    """The registry for the installed plug-ins plus ``extra_modules`` (cached)."""
    return Registry(get_plugin_manager(extra_modules))
