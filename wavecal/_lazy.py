"""Package attributes imported on first use (PEP 562), so that importing a package stays fast."""
from __future__ import annotations

import sys
from collections.abc import Callable
from importlib import import_module

__all__ = ["lazy_attributes"]


def lazy_attributes(package: str, where: dict[str, str]
                    ) -> tuple[Callable[[str], object], Callable[[], list[str]]]:
    """The module-level ``__getattr__`` and ``__dir__`` of ``package``.

    Parameters
    ----------
    package : str
        The package's ``__name__``.
    where : dict
        Public name to the submodule (relative to ``package``) that defines it.
    """

    def __getattr__(name: str) -> object:
        if name not in where:
            msg = f"module {package!r} has no attribute {name!r}"
            raise AttributeError(msg)
        value = getattr(import_module(f".{where[name]}", package), name)
        setattr(sys.modules[package], name, value)  # found directly from now on
        return value

    def __dir__() -> list[str]:
        module = sys.modules[package]
        return sorted(set(vars(module)) | set(getattr(module, "__all__", ())))

    return __getattr__, __dir__
