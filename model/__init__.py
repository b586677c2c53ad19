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
fluoroscopy and CT accumulations (:mod:`.fluoro_ct`), the CT patient's water-equivalent
diameter from axial images (:mod:`.ct_size`) and from localizers (:mod:`.ct_localizer`) and the
size-specific dose estimate (:mod:`.ssde`). :mod:`.exposure` and :mod:`.bulk` share one dose
chain (:mod:`._chain`). Every error on bad input is a :class:`ModelError` (:mod:`.errors`).

Skin dose of fluoroscopy and interventional procedures: the patient on the table
(:mod:`.patient_model`), the room frame and the C-arm (:mod:`.skin_geometry`), each event's
numbers and the room's (:mod:`.skin_events`), the table, backscatter and tissue factors
(:mod:`.skin_factors`), the skin-dose map and peak skin dose (:mod:`.skin_dose`), and the NCRP
168 follow-up levels with cumulative skin dose (:mod:`.followup`).

Mammography: the beam at the breast for Mo, Rh, W and Ag anodes (:mod:`.mammography`), the
mean glandular dose by the Dance method (:mod:`.glandular_dose`) from coefficient tables
(:mod:`.dance_coefficients`) computed by beamaudit's own breast Monte Carlo
(:mod:`.breast_montecarlo`, :mod:`.photon_interactions`; generators, not run-time code).

Effective dose: population-average estimates from DLP and DAP with sourced coefficients and ICRP 103
tissue weights (:mod:`.effective_dose`), and the cumulative effective dose per pseudonymised patient
over a window for the quality assurance of recurrent imaging (:mod:`.recurrent`).
"""

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
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
    from beamaudit.model.ct_localizer import (
        LocalizerCalibration,
        LocalizerSizes,
        PhantomLocalizer,
        calibration_from_phantoms,
        localizer_sizes,
    )
    from beamaudit.model.ct_size import (
        AxialSizes,
        ContourMethod,
        ScanRangeSize,
        axial_sizes,
        patient_mask,
        scan_range_size,
    )
    from beamaudit.model.dance_coefficients import (
        OfficialCoefficients,
        load_official_coefficients,
        typical_glandularity,
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
    from beamaudit.model.effective_dose import (
        EffectiveDoseEstimates,
        ct_effective_dose_msv,
        dap_effective_dose_msv,
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
    from beamaudit.model.followup import (
        FOLLOW_UP_LEVELS_MGY,
        CumulativeSkinDose,
        LevelCheck,
        cumulative_skin_dose,
        substantial_dose_levels,
        substantial_dose_levels_crossed,
    )
    from beamaudit.model.geometry import (
        GeometryInputs,
        ResolvedGeometry,
        field_area_at_distance_cm2,
        resolve_geometry,
    )
    from beamaudit.model.glandular_dose import (
        GlandularDose,
        TomosynthesisAcquisition,
        mean_glandular_dose,
    )
    from beamaudit.model.mammography import BreastBeam, MammographyTechnique, breast_beam
    from beamaudit.model.patient_model import PatientModel, SkinGrid, patient_model, skin_grid
    from beamaudit.model.patient_support import (
        PatientSupport,
        SupportTransmission,
        default_patient_support,
        support_transmission,
    )
    from beamaudit.model.recurrent import CumulativeDoses, cumulative_effective_dose
    from beamaudit.model.skin_dose import SkinDoseMap, skin_dose_map
    from beamaudit.model.skin_events import SkinEvent, SkinRoom
    from beamaudit.model.skin_factors import BeamFactors, FixedBeamFactors, SpectrumBeamFactors
    from beamaudit.model.skin_geometry import reference_point_distance_mm
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

#: Where each public name lives: a name's module is imported on first use (PEP 562), so that
#: importing one part of the model (e.g. ``beamaudit.model.followup``) does not import all of it
#: with SciPy's optimisers and interpolators (issue #24: start-up of commands).
_LAZY: dict[str, str] = {
    "Material": "beamaudit.model.attenuation",
    "energy_bin_centres_kev": "beamaudit.model.attenuation",
    "mass_attenuation_cm2_g": "beamaudit.model.attenuation",
    "mass_energy_absorption_cm2_g": "beamaudit.model.attenuation",
    "material": "beamaudit.model.attenuation",
    "material_names": "beamaudit.model.attenuation",
    "mu_en_ratio": "beamaudit.model.attenuation",
    "BackscatterEstimate": "beamaudit.model.backscatter",
    "BackscatterEstimates": "beamaudit.model.backscatter",
    "BackscatterTable": "beamaudit.model.backscatter",
    "backscatter_estimate": "beamaudit.model.backscatter",
    "backscatter_estimates": "beamaudit.model.backscatter",
    "backscatter_factor": "beamaudit.model.backscatter",
    "equivalent_square_side_cm": "beamaudit.model.backscatter",
    "load_backscatter_table": "beamaudit.model.backscatter",
    "BackscatterCurve": "beamaudit.model.backscatter_kernels",
    "BackscatterKernels": "beamaudit.model.backscatter_kernels",
    "backscatter_curve": "beamaudit.model.backscatter_kernels",
    "load_backscatter_kernels": "beamaudit.model.backscatter_kernels",
    "BeamConfig": "beamaudit.model.beam",
    "BeamResult": "beamaudit.model.beam",
    "BeamSpec": "beamaudit.model.beam",
    "compute_beam": "beamaudit.model.beam",
    "output_at_distance_ugy_per_mas": "beamaudit.model.beam",
    "tissue_to_air_ratio": "beamaudit.model.beam",
    "BeamTable": "beamaudit.model.beamtable",
    "BulkDose": "beamaudit.model.bulk",
    "dose_from_beams": "beamaudit.model.bulk",
    "CalibrationResidual": "beamaudit.model.calibration",
    "QAMeasurement": "beamaudit.model.calibration",
    "RoomCalibration": "beamaudit.model.calibration",
    "calibrate_room": "beamaudit.model.calibration",
    "default_calibration": "beamaudit.model.calibration",
    "LocalizerCalibration": "beamaudit.model.ct_localizer",
    "LocalizerSizes": "beamaudit.model.ct_localizer",
    "PhantomLocalizer": "beamaudit.model.ct_localizer",
    "calibration_from_phantoms": "beamaudit.model.ct_localizer",
    "localizer_sizes": "beamaudit.model.ct_localizer",
    "AxialSizes": "beamaudit.model.ct_size",
    "ContourMethod": "beamaudit.model.ct_size",
    "ScanRangeSize": "beamaudit.model.ct_size",
    "axial_sizes": "beamaudit.model.ct_size",
    "patient_mask": "beamaudit.model.ct_size",
    "scan_range_size": "beamaudit.model.ct_size",
    "OfficialCoefficients": "beamaudit.model.dance_coefficients",
    "load_official_coefficients": "beamaudit.model.dance_coefficients",
    "typical_glandularity": "beamaudit.model.dance_coefficients",
    "DefaultValue": "beamaudit.model.defaults",
    "ExamDefault": "beamaudit.model.defaults",
    "dose_default": "beamaudit.model.defaults",
    "exam_default": "beamaudit.model.defaults",
    "find_exam": "beamaudit.model.defaults",
    "ReportedVsReconstructed": "beamaudit.model.dose",
    "air_kerma_at_distance_mgy": "beamaudit.model.dose",
    "compare_reported": "beamaudit.model.dose",
    "dap_gy_cm2": "beamaudit.model.dose",
    "entrance_surface_air_kerma_mgy": "beamaudit.model.dose",
    "entrance_surface_dose_mgy": "beamaudit.model.dose",
    "incident_air_kerma_mgy": "beamaudit.model.dose",
    "inverse_square_air_kerma_mgy": "beamaudit.model.dose",
    "relative_uncertainty_of_product": "beamaudit.model.dose",
    "EffectiveDoseEstimates": "beamaudit.model.effective_dose",
    "ct_effective_dose_msv": "beamaudit.model.effective_dose",
    "dap_effective_dose_msv": "beamaudit.model.effective_dose",
    "ModelError": "beamaudit.model.errors",
    "BeamInputs": "beamaudit.model.exposure",
    "DoseFigure": "beamaudit.model.exposure",
    "ExposureDose": "beamaudit.model.exposure",
    "compute_exposure_dose": "beamaudit.model.exposure",
    "dose_from_beam": "beamaudit.model.exposure",
    "DEFAULT_TOTAL_FILTRATION_MM_AL": "beamaudit.model.filtration",
    "FilterSpec": "beamaudit.model.filtration",
    "default_filters": "beamaudit.model.filtration",
    "parse_filter": "beamaudit.model.filtration",
    "CtAcquisition": "beamaudit.model.fluoro_ct",
    "CtAcquisitionDose": "beamaudit.model.fluoro_ct",
    "CtStudyDose": "beamaudit.model.fluoro_ct",
    "ProjectionAccumulation": "beamaudit.model.fluoro_ct",
    "ProjectionEvent": "beamaudit.model.fluoro_ct",
    "accumulate_projection_events": "beamaudit.model.fluoro_ct",
    "ct_acquisition_dose": "beamaudit.model.fluoro_ct",
    "ct_study_dose": "beamaudit.model.fluoro_ct",
    "FOLLOW_UP_LEVELS_MGY": "beamaudit.model.followup",
    "CumulativeSkinDose": "beamaudit.model.followup",
    "LevelCheck": "beamaudit.model.followup",
    "cumulative_skin_dose": "beamaudit.model.followup",
    "substantial_dose_levels": "beamaudit.model.followup",
    "substantial_dose_levels_crossed": "beamaudit.model.followup",
    "GeometryInputs": "beamaudit.model.geometry",
    "ResolvedGeometry": "beamaudit.model.geometry",
    "field_area_at_distance_cm2": "beamaudit.model.geometry",
    "resolve_geometry": "beamaudit.model.geometry",
    "GlandularDose": "beamaudit.model.glandular_dose",
    "TomosynthesisAcquisition": "beamaudit.model.glandular_dose",
    "mean_glandular_dose": "beamaudit.model.glandular_dose",
    "BreastBeam": "beamaudit.model.mammography",
    "MammographyTechnique": "beamaudit.model.mammography",
    "breast_beam": "beamaudit.model.mammography",
    "PatientModel": "beamaudit.model.patient_model",
    "SkinGrid": "beamaudit.model.patient_model",
    "patient_model": "beamaudit.model.patient_model",
    "skin_grid": "beamaudit.model.patient_model",
    "PatientSupport": "beamaudit.model.patient_support",
    "SupportTransmission": "beamaudit.model.patient_support",
    "default_patient_support": "beamaudit.model.patient_support",
    "support_transmission": "beamaudit.model.patient_support",
    "CumulativeDoses": "beamaudit.model.recurrent",
    "cumulative_effective_dose": "beamaudit.model.recurrent",
    "SkinDoseMap": "beamaudit.model.skin_dose",
    "skin_dose_map": "beamaudit.model.skin_dose",
    "SkinEvent": "beamaudit.model.skin_events",
    "SkinRoom": "beamaudit.model.skin_events",
    "BeamFactors": "beamaudit.model.skin_factors",
    "FixedBeamFactors": "beamaudit.model.skin_factors",
    "SpectrumBeamFactors": "beamaudit.model.skin_factors",
    "reference_point_distance_mm": "beamaudit.model.skin_geometry",
    "TubeSpectrum": "beamaudit.model.spectrum",
    "tube_spectrum": "beamaudit.model.spectrum",
    "SizeSpecificDose": "beamaudit.model.ssde",
    "effective_diameter_cm": "beamaudit.model.ssde",
    "size_specific_dose_estimate": "beamaudit.model.ssde",
    "ssde_conversion_factor": "beamaudit.model.ssde",
    "water_equivalent_diameter_cm": "beamaudit.model.ssde",
    "water_equivalent_diameter_from_image_cm": "beamaudit.model.ssde",
    "TrailStep": "beamaudit.model.trail",
    "WhyTrail": "beamaudit.model.trail",
}


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        try:  # a submodule, as the eager imports used to leave it on the package
            return importlib.import_module(f"{__name__}.{name}")
        except ModuleNotFoundError:
            raise AttributeError(f"module {__name__!r} has no attribute {name!r}") from None
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted({*globals(), *_LAZY})


__all__ = [
    "DEFAULT_TOTAL_FILTRATION_MM_AL",
    "FOLLOW_UP_LEVELS_MGY",
    "AxialSizes",
    "BackscatterCurve",
    "BackscatterEstimate",
    "BackscatterEstimates",
    "BackscatterKernels",
    "BackscatterTable",
    "BeamConfig",
    "BeamFactors",
    "BeamInputs",
    "BeamResult",
    "BeamSpec",
    "BeamTable",
    "BreastBeam",
    "BulkDose",
    "CalibrationResidual",
    "ContourMethod",
    "CtAcquisition",
    "CtAcquisitionDose",
    "CtStudyDose",
    "CumulativeDoses",
    "CumulativeSkinDose",
    "DefaultValue",
    "DoseFigure",
    "EffectiveDoseEstimates",
    "ExamDefault",
    "ExposureDose",
    "FilterSpec",
    "FixedBeamFactors",
    "GeometryInputs",
    "GlandularDose",
    "LevelCheck",
    "LocalizerCalibration",
    "LocalizerSizes",
    "MammographyTechnique",
    "Material",
    "ModelError",
    "OfficialCoefficients",
    "PatientModel",
    "PatientSupport",
    "PhantomLocalizer",
    "ProjectionAccumulation",
    "ProjectionEvent",
    "QAMeasurement",
    "ReportedVsReconstructed",
    "ResolvedGeometry",
    "RoomCalibration",
    "ScanRangeSize",
    "SizeSpecificDose",
    "SkinDoseMap",
    "SkinEvent",
    "SkinGrid",
    "SkinRoom",
    "SpectrumBeamFactors",
    "SupportTransmission",
    "TomosynthesisAcquisition",
    "TrailStep",
    "TubeSpectrum",
    "WhyTrail",
    "accumulate_projection_events",
    "air_kerma_at_distance_mgy",
    "axial_sizes",
    "backscatter_curve",
    "backscatter_estimate",
    "backscatter_estimates",
    "backscatter_factor",
    "breast_beam",
    "calibrate_room",
    "calibration_from_phantoms",
    "compare_reported",
    "compute_beam",
    "compute_exposure_dose",
    "ct_acquisition_dose",
    "ct_effective_dose_msv",
    "ct_study_dose",
    "cumulative_effective_dose",
    "cumulative_skin_dose",
    "dap_effective_dose_msv",
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
    "load_official_coefficients",
    "localizer_sizes",
    "mass_attenuation_cm2_g",
    "mass_energy_absorption_cm2_g",
    "material",
    "material_names",
    "mean_glandular_dose",
    "mu_en_ratio",
    "output_at_distance_ugy_per_mas",
    "parse_filter",
    "patient_mask",
    "patient_model",
    "reference_point_distance_mm",
    "relative_uncertainty_of_product",
    "resolve_geometry",
    "scan_range_size",
    "size_specific_dose_estimate",
    "skin_dose_map",
    "skin_grid",
    "ssde_conversion_factor",
    "substantial_dose_levels",
    "substantial_dose_levels_crossed",
    "support_transmission",
    "tissue_to_air_ratio",
    "tube_spectrum",
    "typical_glandularity",
    "water_equivalent_diameter_cm",
    "water_equivalent_diameter_from_image_cm",
]
