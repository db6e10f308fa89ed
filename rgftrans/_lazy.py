"""Lazy re-exports for the package's ``__init__`` files: names are imported on first use.

An ``__init__`` that imported its modules eagerly would make ``import rgftrans.cli``
load numpy, scipy, numba and matplotlib before parsing a single argument, and
would tie the subpackages' import order together.  Each ``__init__`` instead
lists its public names and the module that defines each; ``rgftrans.system.Device``
and ``from rgftrans.transport import transmission`` import the module when
asked (PEP 562 module ``__getattr__``).
"""

from __future__ import annotations

import importlib


def lazy_exports(package: str, exports: dict[str, str]):
    """``(__getattr__, __dir__)`` for a package whose public names live in its modules.

    ``exports`` maps each public name to the module (relative to ``package``) that defines it.
    """

    def __getattr__(name: str):
        module = exports.get(name)
        if module is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(f"{package}.{module}"), name)
        return value

    def __dir__():
        return sorted(set(exports) | {"__doc__", "__name__", "__path__"})

    return __getattr__, __dir__
