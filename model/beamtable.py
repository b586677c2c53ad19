"""Precomputed beam tables: output and HVL on a tube-voltage grid, interpolated in kV.

A dose pipeline evaluates many exposures per beam configuration (a room's tube, filtration and
anode angle; the tube voltage varies). :meth:`BeamTable.build` runs the full spectral calculation
(:func:`beamaudit.model.compute_beam`) once per grid voltage; :meth:`BeamTable.evaluate` then
interpolates linearly in kV (``numpy.interp``), which on the default 0.5 kV grid agrees with the
direct calculation within 0.05 % for output and HVL (tested; the benchmark
``benchmarks/bench_beam.py`` reports speed and agreement). Voltages outside the grid give NaN,
element by element, so one bad exposure does not stop a batch.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from beamaudit.model.beam import BeamConfig, BeamSpec, compute_beam
from beamaudit.model.calibration import RoomCalibration
from beamaudit.model.errors import ModelError
from beamaudit.model.spectrum import get_anode

__all__ = ["DEFAULT_KV_STEP", "BeamTable"]

FloatArray = npt.NDArray[np.float64]

#: Default tube-voltage step of the table, kV.
DEFAULT_KV_STEP = 0.5
#: Columns stored per grid voltage.
_COLUMNS = ("output_ugy_per_mas_1m", "hvl1_mm_al", "hvl2_mm_al", "hvl1_mm_cu", "mean_energy_kev")


@dataclass(frozen=True)
class BeamTable:
    """Beam quantities of one configuration on a kV grid.

    Attributes
    ----------
    config : BeamConfig
    kv_grid : numpy.ndarray
        Increasing tube voltages, kV.
    columns : dict of str to numpy.ndarray
        ``output_ugy_per_mas_1m``, ``hvl1_mm_al``, ``hvl2_mm_al``, ``hvl1_mm_cu``,
        ``mean_energy_kev`` at each grid voltage.
    calibrated : bool
        Whether the output scale came from the room's own QA data.
    filtration_assumed : bool
    """

    config: BeamConfig
    kv_grid: FloatArray
    columns: dict[str, FloatArray]
    calibrated: bool
    filtration_assumed: bool

    @classmethod
    def build(
        cls,
        base: BeamConfig | BeamSpec,
        *,
        kv_grid: npt.ArrayLike | None = None,
        calibration: RoomCalibration | None = None,
    ) -> BeamTable:
        """Compute the table with the direct spectral calculation at every grid voltage.

        Parameters
        ----------
        base : BeamConfig or BeamSpec
            The configuration; a BeamSpec's own ``kv`` is ignored.
        kv_grid : array_like, optional
            Strictly increasing voltages; default the anode's whole range in 0.5 kV steps.
        calibration : RoomCalibration, optional
            As for :func:`beamaudit.model.compute_beam`.

        Returns
        -------
        BeamTable

        Raises
        ------
        ModelError
            A grid that is not strictly increasing, too short, or outside the anode's range.
        """
        config = base.config if isinstance(base, BeamSpec) else base
        if kv_grid is None:
            a = get_anode(config.anode)
            n = round((a.kv_max - a.kv_min) / DEFAULT_KV_STEP)
            grid = a.kv_min + DEFAULT_KV_STEP * np.arange(n + 1, dtype=np.float64)
        else:
            grid = np.asarray(kv_grid, dtype=np.float64).ravel()
        if grid.size < 2 or not np.all(np.diff(grid) > 0.0):
            raise ModelError("kv_grid must hold at least two strictly increasing voltages")
        values = {c: np.empty(grid.size) for c in _COLUMNS}
        calibrated = filtration_assumed = False
        for i, kv in enumerate(grid):
            result = compute_beam(config.at_kv(float(kv)), calibration=calibration)
            for c in _COLUMNS:
                values[c][i] = getattr(result, c)
            calibrated, filtration_assumed = result.calibrated, result.filtration_assumed
        for column in values.values():
            column.setflags(write=False)
        grid.setflags(write=False)
        return cls(
            config=config,
            kv_grid=grid,
            columns=values,
            calibrated=calibrated,
            filtration_assumed=filtration_assumed,
        )

    def _interp(self, column: str, kv: npt.ArrayLike) -> FloatArray:
        x = np.asarray(kv, dtype=np.float64)
        y = np.interp(x, self.kv_grid, self.columns[column])
        outside = ~((x >= self.kv_grid[0]) & (x <= self.kv_grid[-1]))  # NaN counts as outside
        result: FloatArray = np.where(outside, np.nan, y)
        return result

    def evaluate(self, kv: npt.ArrayLike) -> tuple[FloatArray, FloatArray]:
        """Output per mAs at 1 m and first HVL at many tube voltages.

        Parameters
        ----------
        kv : array_like
            Tube voltages, kV, any shape.

        Returns
        -------
        output_ugy_per_mas_1m, hvl1_mm_al : numpy.ndarray
            Same shape as ``kv``; NaN where ``kv`` is outside the grid or NaN.
        """
        return self._interp("output_ugy_per_mas_1m", kv), self._interp("hvl1_mm_al", kv)

    def evaluate_column(self, column: str, kv: npt.ArrayLike) -> FloatArray:
        """Any stored column at many tube voltages (NaN outside the grid).

        Parameters
        ----------
        column : str
            One of ``output_ugy_per_mas_1m``, ``hvl1_mm_al``, ``hvl2_mm_al``, ``hvl1_mm_cu``,
            ``mean_energy_kev``.
        kv : array_like

        Returns
        -------
        numpy.ndarray
        """
        if column not in self.columns:
            raise ModelError(f"unknown column {column!r}; columns: {', '.join(self.columns)}")
        return self._interp(column, kv)
