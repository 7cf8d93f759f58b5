"""Loading of named extensions (solvers, affinity models, priors) from entry points."""

from __future__ import annotations

import dataclasses
import warnings


def check_new_name(registry: dict, name, what: str, *, replace_existing: bool = False) -> None:
    """Refuse an empty or non-string ``name``, or one already in ``registry``.

    ``what`` names the kind in messages ("max-cut method", "prior", ...).
    """
    if not isinstance(name, str) or not name or name != name.strip():
        raise ValueError(f"{what} name must be a non-empty string; got {name!r}")
    if name in registry and not replace_existing:
        raise ValueError(f"{what} {name!r} is already registered")


def first_doc_line(func) -> str:
    """The first line of ``func``'s docstring ('' without one), for listings."""
    import inspect

    return (inspect.getdoc(func) or "").strip().split("\n")[0]


def load_plugins(group: str, registry: dict, kind: type, register) -> None:
    """Add the objects of entry-point ``group`` to ``registry``.

    An entry point may name an instance of ``kind`` (a frozen dataclass with a
    ``name`` field; it is stored under the entry point's name) or a plain callable,
    which is handed to ``register(name, callable)``. Names already registered win.
    A plugin that fails to load gives a :class:`~segcut.errors.SegcutWarning`, never
    an error: a broken plugin must not break segcut.
    """
    from importlib.metadata import entry_points

    from .errors import SegcutWarning

    for ep in entry_points(group=group):
        if ep.name in registry:
            continue
        try:
            obj = ep.load()
        except Exception as err:  # noqa: BLE001 - any failure of foreign code
            warnings.warn(f"plugin {ep.name!r} of {group} ({ep.value}) failed to load: {err}",
                          SegcutWarning, stacklevel=4)
            continue
        if isinstance(obj, kind):
            registry[ep.name] = dataclasses.replace(obj, name=ep.name)
        else:
            register(ep.name, obj)
