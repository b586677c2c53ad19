"""beamaudit.model: beam and dose physics (pure functions and small value types).

Beam model: the thick-target spectrum of a tungsten anode (:mod:`.spectrum`), interaction data
(:mod:`.attenuation`), filtration (:mod:`.filtration`), beam quantities (:mod:`.beam`,
:mod:`.quantities`), room calibration (:mod:`.calibration`), uncertainty propagation
(:mod:`.uncertainty`) and precomputed tables (:mod:`.beamtable`). Every figure is an estimate for
QA and optimisation.
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
from beamaudit.model.beam import (
    BeamConfig,
    BeamResult,
    BeamSpec,
    compute_beam,
    output_at_distance_ugy_per_mas,
    tissue_to_air_ratio,
)
from beamaudit.model.beamtable import BeamTable
from beamaudit.model.calibration import (
    CalibrationResidual,
    QAMeasurement,
    RoomCalibration,
    calibrate_room,
    default_calibration,
)
from beamaudit.model.errors import ModelError
from beamaudit.model.filtration import (
    DEFAULT_TOTAL_FILTRATION_MM_AL,
    FilterSpec,
    default_filters,
    parse_filter,
)
from beamaudit.model.spectrum import TubeSpectrum, tube_spectrum

__all__ = [
    "DEFAULT_TOTAL_FILTRATION_MM_AL",
    "BeamConfig",
    "BeamResult",
    "BeamSpec",
    "BeamTable",
    "CalibrationResidual",
    "FilterSpec",
    "Material",
    "ModelError",
    "QAMeasurement",
    "RoomCalibration",
    "TubeSpectrum",
    "calibrate_room",
    "compute_beam",
    "default_calibration",
    "default_filters",
    "energy_bin_centres_kev",
    "mass_attenuation_cm2_g",
    "mass_energy_absorption_cm2_g",
    "material",
    "material_names",
    "mu_en_ratio",
    "output_at_distance_ugy_per_mas",
    "parse_filter",
    "tissue_to_air_ratio",
    "tube_spectrum",
]
