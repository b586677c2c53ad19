"""The beamaudit demo: an invented hospital's DICOM traffic with planted findings.

:func:`generate_scenario` writes the invented scenario of :mod:`beamaudit.api.demo.scenario` as
real DICOM files (image headers and Radiation Dose SRs) with a manifest of what the reviews must
find. Everything it writes is invented and documented as such.
"""

from beamaudit.api.demo.errors import DemoError
from beamaudit.api.demo.generate import default_end_month, generate_scenario
from beamaudit.api.demo.manifest import PlantedFinding, RoomEntry, ScenarioManifest

__all__ = [
    "DemoError",
    "PlantedFinding",
    "RoomEntry",
    "ScenarioManifest",
    "default_end_month",
    "generate_scenario",
]
