"""Names of a package imported from their modules when first used (PEP 562)."""

from __future__ import annotations

from importlib import import_module

__all__ = ["lazy_exports"]


def lazy_exports(package: str, where: dict[str, str], namespace: dict):
    """``__getattr__`` and ``__dir__`` for ``package``: each name in ``where`` (name -> module
    inside the package) is imported on first use and kept in ``namespace`` (its globals)."""

    def __getattr__(name: str):
        if name not in where:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(import_module(f".{where[name]}", package), name)
        namespace[name] = value
        return value

    def __dir__():
        return sorted(set(namespace) | set(where))

    return __getattr__, __dir__
