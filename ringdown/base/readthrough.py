"""Read-only attributes that read through to a field of the same object, visible to IDEs.

A result that holds its numbers in one field (``Mode.derived``, ``ConditionMode.values``) still
offers them as attributes (``mode.f_d_hz``). Each attribute is declared in the class body, so
an IDE, ``dir()``, ``help()`` and a type checker see it, instead of a ``__getattr__`` that hides
every name.
"""

from __future__ import annotations

from typing import Any, Generic, TypeVar, overload

__all__ = ["ReadThrough"]

T = TypeVar("T")


class ReadThrough(Generic[T]):
    """``obj.NAME`` is ``obj.<holder>.NAME``, or ``obj.<holder>[key or NAME]`` when the holder is
    a dict. Declare it as ``f_d_hz = ReadThrough[float]("derived")`` in a class body.

    Parameters
    ----------
    holder : str
        Name of the field that holds the value.
    key : str or None
        Key or attribute name in the holder, when it differs from the attribute's own name.
    """

    __slots__ = ("holder", "key", "name")

    def __init__(self, holder: str, key: str | None = None) -> None:
        self.holder = holder
        self.key = key
        self.name = key or ""

    def __set_name__(self, owner: type, name: str) -> None:
        self.name = self.key or name

    @overload
    def __get__(self, obj: None, objtype: type | None = None) -> ReadThrough[T]: ...

    @overload
    def __get__(self, obj: object, objtype: type | None = None) -> T: ...

    def __get__(self, obj: Any, objtype: type | None = None) -> Any:
        if obj is None:
            return self
        held = getattr(obj, self.holder)
        if isinstance(held, dict):
            return held[self.name]
        return getattr(held, self.name)

    def __set__(self, obj: Any, value: Any) -> None:
        raise AttributeError(f"{self.name!r} is read from {self.holder!r}; replace that instead")
