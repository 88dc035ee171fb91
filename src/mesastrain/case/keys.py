"""How a case-file key is declared, read and echoed: :class:`Kind`, :class:`Key`, :class:`Table`.

The declarations themselves, one per key of the case file, are in
:mod:`mesastrain.case.schema`. This module holds the machinery that every
declaration shares: reading a table (unknown keys, each value's reader,
missing required keys; :func:`read_table`) and echoing a parsed table in
case-file form (:func:`echo`, for :meth:`mesastrain.case.types.Case.to_dict`).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from mesastrain.case import readers as rd
from mesastrain.errors import CaseError
from mesastrain.units import show_value

__all__ = ["Key", "Kind", "Table", "echo", "read_table"]


def _plain(value):
    """A parsed value in case-file form: tuples become lists (recursively)."""
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    return value


@dataclass(frozen=True)
class Kind:
    """One kind of value: how it is read, echoed and described.

    Attributes
    ----------
    read
        ``(value, key) -> parsed``, raising :class:`CaseError` with ``key``.
    json : dict
        JSON Schema of the value as written in the file.
    echo
        ``parsed -> value as written in the file`` (for :func:`echo`).
    """

    read: Callable
    json: dict
    echo: Callable = _plain


@dataclass(frozen=True)
class Key:
    """One case-file key.

    Attributes
    ----------
    name : str
        The key as written in the file.
    kind : Kind
    doc : str
        What the key means (the JSON Schema description).
    default : object
        The parsed value when the key is left out (None: unset).
    required : str
        Non-empty for a required key: what to give, as the missing-key error says.
    computed : str
        Non-empty when the default depends on other keys: how it is found.
    attr : str
        Attribute of the dataclass that holds the value, when not ``name``.
    echo_if
        ``item -> bool``: echo the key only when true (default: always).
    shapes : tuple of str
        ``[pattern]`` keys: the shapes that take the key (empty: every shape).
    required_for : tuple of (str, str)
        ``[pattern]`` keys: (shape, what to give) for the shapes that require it.
    """

    name: str
    kind: Kind
    doc: str
    default: object = None
    required: str = ""
    computed: str = ""
    attr: str = ""
    echo_if: Callable | None = None
    shapes: tuple = ()
    required_for: tuple = ()

    @property
    def field(self) -> str:
        """The dataclass attribute that holds the value."""
        return self.attr or self.name


@dataclass(frozen=True)
class Table:
    """One table (``[name]``) or array of tables (``[[name]]``) of the case file.

    Attributes
    ----------
    name : str
    attr : str
        Attribute of :class:`mesastrain.case.types.Case` that holds it.
    doc : str
    keys : tuple of Key
        In the order the unknown-key errors list them.
    array : bool
        An array of tables, ``[[name]]``.
    """

    name: str
    attr: str
    doc: str
    keys: tuple
    array: bool = False

    @property
    def names(self) -> tuple:
        """The allowed keys, in declaration order."""
        return tuple(k.name for k in self.keys)

    @property
    def hint(self) -> str:
        """How the table is written: ``[name]`` or ``[[name]]``."""
        return f"[[{self.name}]]" if self.array else f"[{self.name}]"

    @property
    def named(self) -> bool:
        """An array whose items carry a unique ``name`` (defaulted to name1, name2, ...)."""
        return self.array and "name" in self.names

    def key(self, name: str) -> Key:
        """The declaration of key ``name``."""
        return next(k for k in self.keys if k.name == name)

    def default(self, name: str):
        """The default of key ``name`` (as the case holds it)."""
        return self.key(name).default


def read_table(tab: Table, value, key: str) -> dict:
    """Read one table: its keys in file order, then its missing required keys.

    Parameters
    ----------
    tab : Table
    value : object
        The table as :mod:`tomllib` gave it.
    key : str
        Its key path (``mesh``, ``layer[2]``).

    Returns
    -------
    dict
        The keys given, read by their kinds; defaults are not filled in.
    """
    if not isinstance(value, dict):
        raise CaseError(key, f"expected a table {tab.hint}, got {show_value(value)}")
    out = {}
    for name, v in value.items():
        sub = f"{key}.{name}"
        if name not in tab.names:
            raise rd.unknown_key(sub, name, tab.names)
        out[name] = tab.key(name).kind.read(v, sub)
    for k in tab.keys:
        if k.required and k.name not in out:
            raise rd.missing(f"{key}.{k.name}", k.required)
    return out


def echo(tab: Table, item) -> dict:
    """One table item (a dataclass) in case-file form; unset (None) values left out.

    The ``name`` of a named array comes first.
    """
    keys = tab.keys
    if tab.named:
        keys = (tab.key("name"),) + tuple(k for k in keys if k.name != "name")
    out = {}
    for k in keys:
        value = getattr(item, k.field)
        if value is None or (k.echo_if is not None and not k.echo_if(item)):
            continue
        out[k.name] = k.kind.echo(value)
    return out
