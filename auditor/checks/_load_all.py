"""Import every check module in this package so that each registers itself.

Modules are found by name (every module here except the infrastructure ones), so adding a check
never means editing a shared list.
"""

import importlib
import pkgutil

_INFRASTRUCTURE = {"registry", "common", "_load_all"}

from . import __path__ as _package_path

for _info in sorted(pkgutil.iter_modules(_package_path), key=lambda m: m.name):
    if _info.name not in _INFRASTRUCTURE:
        importlib.import_module(f"auditor.checks.{_info.name}")
