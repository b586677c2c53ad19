"""beamaudit: patient-dose audit for x-ray examinations.

The four stages install as subpackages: :mod:`beamaudit.ingest` (DICOM
headers and dose reports), :mod:`beamaudit.model` (beam and dose physics),
:mod:`beamaudit.api` (store, pipeline, reviews, REST, CLI) and
:mod:`beamaudit.dashboards` (plotly figures and pages).

Every dose figure beamaudit produces is an estimate, for quality assurance
and optimisation. Clinical decisions about a patient need a qualified
medical physicist; local regulations and licensed practice take precedence.
"""

__version__ = "0.1.0"

#: The caution beside every dose figure (pages, API answers, exports, command output): the one
#: wording; every stage may import the package root, so every stage uses this constant.
CAUTION = (
    "Every dose figure shown here is an estimate, for quality assurance and optimisation. "
    "Clinical decisions about a patient need a qualified medical physicist; "
    "local regulations and licensed practice take precedence."
)

__all__ = ["CAUTION", "__version__"]
