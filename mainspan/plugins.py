"""Registries of named, pluggable parts: candidate builders, cost terms, writers.

A registry maps a short name to a callable.  Third-party packages add their
own through the entry-point groups ``mainspan.candidates``,
``mainspan.cost_terms`` and ``mainspan.writers``; each entry point must load
to a callable, and is checked when it is registered so that a broken plugin
is named in the error rather than failing later in the pipeline.
"""

from __future__ import annotations

import difflib
import re
from importlib.metadata import entry_points
from typing import Callable

from .errors import InputError, MainspanError

__all__ = ["Registry", "PluginError"]

_NAME = re.compile(r"^[a-z][a-z0-9_\-]*$")


class PluginError(MainspanError, TypeError):
    """A plugin is malformed (bad name, not callable, duplicate)."""


class Registry:
    """A named collection of callables of one role.

    Parameters
    ----------
    kind : str
        What the entries are, for messages ("candidate builder").
    group : str
        Entry-point group scanned once, lazily, on first lookup.
    option : str, optional
        The command-line option that selects an entry, for messages.
    check : callable, optional
        ``check(name, obj)`` raising :class:`PluginError` if *obj* is unfit.

    Examples
    --------
    >>> reg = Registry("greeting", "mainspan.example_greetings")
    >>> @reg.register("hello")
    ... def hello():
    ...     return "hi"
    >>> reg.get("hello")()
    'hi'
    >>> reg.names()
    ('hello',)
    """

    def __init__(self, kind: str, group: str, *, option: str | None = None,
                 check: Callable | None = None):
        self.kind = kind
        self.group = group
        self.option = option
        self._check = check
        self._items: dict[str, Callable] = {}
        self._loaded_entry_points = False

    def register(self, name: str, obj: Callable | None = None, *, replace: bool = False):
        """Register *obj* under *name*; usable as a decorator when *obj* is omitted."""

        def _add(fn):
            if not isinstance(name, str) or not _NAME.match(name):
                raise PluginError(
                    f"{self.kind} name {name!r} is not valid: use lower-case letters, "
                    "digits, '_' or '-', starting with a letter")
            if not callable(fn):
                raise PluginError(f"{self.kind} {name!r} is not callable (got {type(fn).__name__})")
            if name in self._items and not replace and self._items[name] is not fn:
                raise PluginError(f"{self.kind} {name!r} is already registered; "
                                  "choose another name or pass replace=True")
            if self._check is not None:
                self._check(name, fn)
            self._items[name] = fn
            return fn

        if obj is None:
            return _add
        return _add(obj)

    def _load_entry_points(self):
        if self._loaded_entry_points:
            return
        self._loaded_entry_points = True
        for ep in sorted(entry_points(group=self.group), key=lambda e: e.name):
            if ep.name in self._items:
                continue
            try:
                obj = ep.load()
            except Exception as exc:  # a broken plugin must be named, not crash us
                raise PluginError(
                    f"{self.kind} plugin {ep.name!r} ({ep.value}) from entry-point group "
                    f"{self.group!r} failed to load: {exc}; fix or uninstall that package"
                ) from None
            try:
                self.register(ep.name, obj)
            except PluginError as exc:
                raise PluginError(f"{exc} (plugin {ep.value} in group {self.group!r})") from None

    def names(self) -> tuple[str, ...]:
        """The registered names, sorted."""
        self._load_entry_points()
        return tuple(sorted(self._items))

    def __contains__(self, name) -> bool:
        self._load_entry_points()
        return name in self._items

    def get(self, name: str) -> Callable:
        """Return the entry called *name*; an unknown name lists the valid ones."""
        self._load_entry_points()
        try:
            return self._items[name]
        except (KeyError, TypeError):
            valid = ", ".join(self.names())
            close = difflib.get_close_matches(str(name), self.names(), n=1)
            hint = f" Did you mean {close[0]!r}?" if close else ""
            where = f" (option {self.option})" if self.option else ""
            raise InputError(
                f"unknown {self.kind} {name!r}{where}; valid names are: {valid}.{hint}"
            ) from None
