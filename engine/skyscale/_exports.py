"""Lazy re-exports for the subpackages' ``__init__`` files.

A subpackage names what it offers and from which of its modules; nothing is imported
until a name is first used, so importing one module of the package never imports the
others (and no import cycle can pass through a package ``__init__``).  Code inside
skyscale imports from the defining module, never from a package ``__init__``.
"""

import importlib

__all__ = ["lazy_exports"]


def lazy_exports(package, exports):
    """Return ``(__all__, __getattr__, __dir__)`` for a package.

    Parameters
    ----------
    package : str
        The package's ``__name__``.
    exports : dict
        Module name inside the package (dotted for one further down) -> the names it
        exports.
    """
    where = {name: module for module, names in exports.items() for name in names}

    def __getattr__(name):
        module = where.get(name)
        if module is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        return getattr(importlib.import_module(f"{package}.{module}"), name)

    def __dir__():
        return sorted(set(where) | {m for m in exports if "." not in m})

    return sorted(where), __getattr__, __dir__
