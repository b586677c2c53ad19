"""beamaudit: patient-dose audit for x-ray examinations.

The four stages install as subpackages: :mod:`beamaudit.ingest` (DICOM
headers and dose reports), :mod:`beamaudit.model` (beam and dose physics),
:mod:`beamaudit.api` (store, pipeline, reviews, REST, CLI) and
:mod:`beamaudit.dashboards` (plotly figures and pages).

Every dose figure beamaudit produces is an estimate, for quality assurance
and optimisation. Clinical decisions about a patient need a qualified
medical physicist; local regulations and licensed practice take precedence.
"""

import importlib
import sys
from collections.abc import Callable
from typing import Any

__version__ = "0.1.0"

__all__ = ["__version__", "lazy_exports"]


def lazy_exports(package: str, names: dict[str, str]) -> Callable[[str], Any]:
    """A module ``__getattr__`` (PEP 562) for ``package``: each name in ``names`` is imported
    from its module (the value) on first use and kept in the package, so that importing the
    package, or one light module of it, does not import what its other modules need."""

    def __getattr__(name: str) -> Any:
        module = names.get(name)
        if module is None:
            raise AttributeError(f"module {package!r} has no attribute {name!r}")
        value = getattr(importlib.import_module(module), name)
        setattr(sys.modules[package], name, value)
        return value

    return __getattr__
