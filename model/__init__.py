"""beamaudit.model: beam and dose physics (pure functions and small value types).

Beam model: the thick-target spectrum of a tungsten anode (:mod:`.spectrum`), interaction data
(:mod:`.attenuation`), filtration (:mod:`.filtration`), beam quantities (:mod:`.beam`,
:mod:`.quantities`), room calibration (:mod:`.calibration`), uncertainty propagation
(:mod:`.uncertainty`) and precomputed tables (:mod:`.beamtable`). Every figure is an estimate for
QA and optimisation.

Dose figures: geometry from what an exposure carries (:mod:`.geometry`, documented defaults in
:mod:`.defaults`), the dose chain (:mod:`.dose`), backscatter factors from beamaudit's own Monte
Carlo kernels weighted by each beam's spectrum (:mod:`.backscatter_kernels`, made by
:mod:`.montecarlo_kernels`; the HVL tables in :mod:`.backscatter`), the table top and mattress
of an under-couch tube (:mod:`.patient_support`),
every figure of one exposure with its uncertainty and why trail (:mod:`.exposure`,
:mod:`.trail`), the same figures of many stored exposures at once as arrays (:mod:`.bulk`),
fluoroscopy and CT accumulations (:mod:`.fluoro_ct`) and the size-specific dose
estimate (:mod:`.ssde`). :mod:`.exposure` and :mod:`.bulk` share one dose chain
(:mod:`._chain`). Every error on bad input is a :class:`ModelError` (:mod:`.errors`).
"""

from beamaudit.model.attenuation import (
    Material,
    energy_bin_centres_kev,
    mass_attenuation_cm2_g,
    mass_energy_absorption_cm2_g,
    material,
    material_names,
    mu_en_ratio,
)
from beamaudit.model.backscatter import (
    BackscatterEstimate,
    BackscatterEstimates,
    BackscatterTable,
    backscatter_estimate,
    backscatter_estimates,
    backscatter_factor,
    equivalent_square_side_cm,
    load_backscatter_table,
)
from beamaudit.model.backscatter_kernels import (
    BackscatterCurve,
    BackscatterKernels,
    backscatter_curve,
    load_backscatter_kernels,
)
from beamaudit.model.beam import (
    BeamConfig,
    BeamResult,
    BeamSpec,
    compute_beam,
    output_at_distance_ugy_per_mas,
    tissue_to_air_ratio,
)
from beamaudit.model.beamtable import BeamTable
from beamaudit.model.bulk import BulkDose, dose_from_beams
from beamaudit.model.calibration import (
    CalibrationResidual,
    QAMeasurement,
    RoomCalibration,
    calibrate_room,
    default_calibration,
)
from beamaudit.model.defaults import (
    DefaultValue,
    ExamDefault,
    dose_default,
    exam_default,
    find_exam,
)
from beamaudit.model.dose import (
    ReportedVsReconstructed,
    air_kerma_at_distance_mgy,
    compare_reported,
    dap_gy_cm2,
    entrance_surface_air_kerma_mgy,
    entrance_surface_dose_mgy,
    incident_air_kerma_mgy,
    inverse_square_air_kerma_mgy,
    relative_uncertainty_of_product,
)
from beamaudit.model.errors import ModelError
from beamaudit.model.exposure import (
    BeamInputs,
    DoseFigure,
    ExposureDose,
    compute_exposure_dose,
    dose_from_beam,
)
from beamaudit.model.filtration import (
    DEFAULT_TOTAL_FILTRATION_MM_AL,
    FilterSpec,
    default_filters,
    parse_filter,
)
from beamaudit.model.fluoro_ct import (
    CtAcquisition,
    CtAcquisitionDose,
    CtStudyDose,
    ProjectionAccumulation,
    ProjectionEvent,
    accumulate_projection_events,
    ct_acquisition_dose,
    ct_study_dose,
)
from beamaudit.model.geometry import (
    GeometryInputs,
    ResolvedGeometry,
    field_area_at_distance_cm2,
    resolve_geometry,
)
from beamaudit.model.patient_support import (
    PatientSupport,
    SupportTransmission,
    default_patient_support,
    support_transmission,
)
from beamaudit.model.spectrum import TubeSpectrum, tube_spectrum
from beamaudit.model.ssde import (
    SizeSpecificDose,
    effective_diameter_cm,
    size_specific_dose_estimate,
    ssde_conversion_factor,
    water_equivalent_diameter_cm,
    water_equivalent_diameter_from_image_cm,
)
from beamaudit.model.trail import TrailStep, WhyTrail

__all__ = [
    "DEFAULT_TOTAL_FILTRATION_MM_AL",
    "BackscatterCurve",
    "BackscatterEstimate",
    "BackscatterEstimates",
    "BackscatterKernels",
    "BackscatterTable",
    "BeamConfig",
    "BeamInputs",
    "BeamResult",
    "BeamSpec",
    "BeamTable",
    "BulkDose",
    "CalibrationResidual",
    "CtAcquisition",
    "CtAcquisitionDose",
    "CtStudyDose",
    "DefaultValue",
    "DoseFigure",
    "ExamDefault",
    "ExposureDose",
    "FilterSpec",
    "GeometryInputs",
    "Material",
    "ModelError",
    "PatientSupport",
    "ProjectionAccumulation",
    "ProjectionEvent",
    "QAMeasurement",
    "ReportedVsReconstructed",
    "ResolvedGeometry",
    "RoomCalibration",
    "SizeSpecificDose",
    "SupportTransmission",
    "TrailStep",
    "TubeSpectrum",
    "WhyTrail",
    "accumulate_projection_events",
    "air_kerma_at_distance_mgy",
    "backscatter_curve",
    "backscatter_estimate",
    "backscatter_estimates",
    "backscatter_factor",
    "calibrate_room",
    "compare_reported",
    "compute_beam",
    "compute_exposure_dose",
    "ct_acquisition_dose",
    "ct_study_dose",
    "dap_gy_cm2",
    "default_calibration",
    "default_filters",
    "default_patient_support",
    "dose_default",
    "dose_from_beam",
    "dose_from_beams",
    "effective_diameter_cm",
    "energy_bin_centres_kev",
    "entrance_surface_air_kerma_mgy",
    "entrance_surface_dose_mgy",
    "equivalent_square_side_cm",
    "exam_default",
    "field_area_at_distance_cm2",
    "find_exam",
    "incident_air_kerma_mgy",
    "inverse_square_air_kerma_mgy",
    "load_backscatter_kernels",
    "load_backscatter_table",
    "mass_attenuation_cm2_g",
    "mass_energy_absorption_cm2_g",
    "material",
    "material_names",
    "mu_en_ratio",
    "output_at_distance_ugy_per_mas",
    "parse_filter",
    "relative_uncertainty_of_product",
    "resolve_geometry",
    "size_specific_dose_estimate",
    "ssde_conversion_factor",
    "support_transmission",
    "tissue_to_air_ratio",
    "tube_spectrum",
    "water_equivalent_diameter_cm",
    "water_equivalent_diameter_from_image_cm",
]
