r"""Coefficient tables of the Dance method: our Monte Carlo's, an official import, typical breasts.

Three kinds of table feed :mod:`beamaudit.model.glandular_dose`:

* **Monoenergetic tables from beamaudit's Monte Carlo** (package data, written by
  ``benchmarks/breast_dgn_mc.py``, see :mod:`beamaudit.model.breast_montecarlo`):
  ``breast_dgn_mc.csv``, :math:`DgN(E, T, g_w) = D_G/K` for photon energies 8-50 keV,
  thicknesses 20-110 mm and glandularities 0.1-100 %, and ``breast_tomo_t_mc.csv``, the
  tomosynthesis t-factor :math:`t(E, T, \theta)` at 50 % glandularity. Both headers say how they
  were made. :class:`DgnTable` interpolates linearly in energy and glandularity and linearly in
  :math:`\ln DgN` against :math:`\ln T` (the coefficients fall roughly as a power of the
  thickness); it never extrapolates.
* **An official coefficient table** a physicist imports (the published g, c, s and T tables of
  Dance et al., typed in, or a national protocol's): :func:`load_official_coefficients` reads
  a CSV of the layout below; where it covers an exposure its factors take precedence over the
  Monte Carlo's, and the result's trail names it.
* **Typical glandularity** by compressed thickness and age group (Dance et al. 2000;
  ``breast_glandularity_dance2000.csv``, from memory, see its header).

Official table layout (CSV, UTF-8)
----------------------------------
Optional ``# key: value`` header lines first; ``title`` and ``source`` are required (they are
recorded in every trail that uses the table). Then a header row and one row per value::

    # title: Dance et al. 2000 conversion factors, typed by the physics service
    # source: Dance DR et al., Phys Med Biol 45:3225 (2000), tables 1, 4 and 6
    factor,key,hvl_mm_al,thickness_mm,glandularity_percent,value
    g,,0.30,20,,0.390
    c,,0.30,20,25,0.885
    s,Mo/Mo,,,,1.000
    s,W/Al,,50,,1.064
    T,±25° 25 projections,,50,,0.97

- ``g`` rows: ``hvl_mm_al`` and ``thickness_mm`` (a complete rectangular grid);
- ``c`` rows: ``hvl_mm_al``, ``thickness_mm`` and ``glandularity_percent`` (a complete grid);
- ``s`` rows: ``key`` the target/filter (``W/Rh``); ``thickness_mm`` optional (where s depends
  on thickness, as for W/Al, give one row per thickness);
- ``T`` rows: ``key`` the tomosynthesis acquisition as named by the caller, ``thickness_mm``.

Every value must be a positive number; a row that breaks the layout is refused with its line
number. Interpolation is linear in each variable, never beyond the table's range.
"""

from __future__ import annotations

import csv
import functools
import hashlib
import io
import math
from collections.abc import Iterable
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import numpy as np
import numpy.typing as npt
from scipy.interpolate import RegularGridInterpolator

from beamaudit.model.errors import ModelError

__all__ = [
    "DGN_TABLE_FILE",
    "TOMO_TABLE_FILE",
    "DescribedTable",
    "DgnTable",
    "OfficialCoefficients",
    "TomoTable",
    "TypicalGlandularity",
    "load_dgn_table",
    "load_official_coefficients",
    "load_tomo_table",
    "parse_described_csv",
    "typical_glandularity",
]

FloatArray = npt.NDArray[np.float64]

DGN_TABLE_FILE = "breast_dgn_mc.csv"
TOMO_TABLE_FILE = "breast_tomo_t_mc.csv"
GLANDULARITY_FILE = "breast_glandularity_dance2000.csv"
_DATA_PACKAGE = "beamaudit.model.data"
OFFICIAL_COLUMNS = ("factor", "key", "hvl_mm_al", "thickness_mm", "glandularity_percent", "value")


@dataclass(frozen=True)
class DescribedTable:
    """A CSV with ``# key: value`` header lines: the header, the column names, the rows.

    ``rows`` are ``(line_number, {column: text})`` in file order.
    """

    header: dict[str, str]
    columns: tuple[str, ...]
    rows: tuple[tuple[int, dict[str, str]], ...]


def parse_described_csv(text: str, *, name: str) -> DescribedTable:
    """Split a self-describing CSV into its header lines and its rows (line numbers kept).

    Raises
    ------
    ModelError
        No column row, or a row with more cells than columns.
    """
    header: dict[str, str] = {}
    lines: list[tuple[int, str]] = []
    for number, line in enumerate(text.splitlines(), start=1):
        if line.startswith("#") and not lines:
            key, _, value = line[1:].partition(":")
            header[key.strip()] = value.strip()
        elif line.strip() and not line.startswith("#"):
            lines.append((number, line))
    if not lines:
        raise ModelError(f"{name}: no column header row")
    parsed = list(csv.reader(io.StringIO("\n".join(text for _, text in lines))))
    columns = tuple(c.strip() for c in parsed[0])
    rows = []
    for (number, _), cells in zip(lines[1:], parsed[1:], strict=True):
        if len(cells) > len(columns):
            raise ModelError(f"{name} line {number}: {len(cells)} cells, {len(columns)} columns")
        cells = cells + [""] * (len(columns) - len(cells))
        rows.append((number, {c: v.strip() for c, v in zip(columns, cells, strict=True)}))
    return DescribedTable(header, columns, tuple(rows))


def _package_table(name: str) -> DescribedTable:
    try:
        text = resources.files(_DATA_PACKAGE).joinpath(name).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ModelError(f"coefficient table {name} is not installed") from None
    return parse_described_csv(text, name=name)


def _grid(values: Iterable[float]) -> FloatArray:
    out = np.array(sorted(set(values)), dtype=np.float64)
    out.setflags(write=False)
    return out


def _number(row: dict[str, str], column: str, where: str) -> float:
    try:
        value = float(row[column])
    except (KeyError, ValueError):
        raise ModelError(f"{where}: {column} {row.get(column)!r} is not a number") from None
    if not math.isfinite(value):
        raise ModelError(f"{where}: {column} is not finite")
    return value


def _check_inside(name: str, value: float, grid: FloatArray, unit: str, table: str) -> None:
    if not (grid[0] - 1e-9 <= value <= grid[-1] + 1e-9):
        raise ModelError(
            f"{name} {value:g} {unit} is outside the {table}'s {grid[0]:g}-{grid[-1]:g} {unit}"
        )


_AXES = {"HVL": "mm Al", "thickness": "mm", "glandularity": "%"}


@dataclass(frozen=True)
class DgnTable:
    """Monoenergetic :math:`DgN(E, T, g_w)` with its uncertainty and header.

    Attributes
    ----------
    energies_kev, thicknesses_mm, glandularities : ndarray
        The grid (glandularity as a fraction).
    dgn, u_dgn : ndarray, shape (energies, thicknesses, glandularities)
    header : dict of str to str
    """

    energies_kev: FloatArray
    thicknesses_mm: FloatArray
    glandularities: FloatArray
    dgn: FloatArray
    u_dgn: FloatArray
    header: dict[str, str] = field(repr=False)

    def at(self, thickness_mm: float, glandularity: float) -> tuple[FloatArray, FloatArray]:
        """DgN and its standard uncertainty at every tabulated energy for one breast.

        Linear in glandularity; :math:`\\ln DgN` linear in :math:`\\ln T`.

        Raises
        ------
        ModelError
            Thickness or glandularity outside the table.
        """
        _check_inside("thickness", thickness_mm, self.thicknesses_mm, "mm", "coefficient table")
        _check_inside(
            "glandularity",
            100.0 * glandularity,
            100.0 * self.glandularities,
            "%",
            "coefficient table",
        )
        log_t = np.log(self.thicknesses_mm)
        j = int(np.clip(np.searchsorted(log_t, math.log(thickness_mm)) - 1, 0, log_t.size - 2))
        ft = (math.log(thickness_mm) - log_t[j]) / (log_t[j + 1] - log_t[j])
        k = int(
            np.clip(
                np.searchsorted(self.glandularities, glandularity) - 1,
                0,
                self.glandularities.size - 2,
            )
        )
        fg = (glandularity - self.glandularities[k]) / (
            self.glandularities[k + 1] - self.glandularities[k]
        )
        log_d = np.log(np.maximum(self.dgn, 1e-12))
        corners = (
            (1 - ft) * (1 - fg) * log_d[:, j, k]
            + ft * (1 - fg) * log_d[:, j + 1, k]
            + (1 - ft) * fg * log_d[:, j, k + 1]
            + ft * fg * log_d[:, j + 1, k + 1]
        )
        rel = self.u_dgn / np.maximum(self.dgn, 1e-12)
        rel_at = (
            (1 - ft) * (1 - fg) * rel[:, j, k]
            + ft * (1 - fg) * rel[:, j + 1, k]
            + (1 - ft) * fg * rel[:, j, k + 1]
            + ft * fg * rel[:, j + 1, k + 1]
        )
        value = np.exp(corners)
        return value, value * rel_at


@functools.cache
def load_dgn_table() -> DgnTable:
    """The shipped Monte Carlo table ``breast_dgn_mc.csv`` (read once, then cached).

    Raises
    ------
    ModelError
        The file is missing or does not form a complete grid.
    """
    table = _package_table(DGN_TABLE_FILE)
    points: dict[tuple[float, float, float], tuple[float, float]] = {}
    for number, row in table.rows:
        where = f"{DGN_TABLE_FILE} line {number}"
        key = (
            _number(row, "energy_kev", where),
            _number(row, "thickness_mm", where),
            _number(row, "glandularity_percent", where) / 100.0,
        )
        points[key] = (_number(row, "dgn", where), _number(row, "u_dgn", where))
    energies = _grid(k[0] for k in points)
    thicknesses = _grid(k[1] for k in points)
    glandularities = _grid(k[2] for k in points)
    shape = (energies.size, thicknesses.size, glandularities.size)
    if len(points) != math.prod(shape):
        raise ModelError(f"{DGN_TABLE_FILE}: not a complete energy x thickness x glandularity grid")
    dgn, u = np.empty(shape), np.empty(shape)
    for (e, t, g), (v, uv) in points.items():
        index = (
            int(np.searchsorted(energies, e)),
            int(np.searchsorted(thicknesses, t)),
            int(np.searchsorted(glandularities, g)),
        )
        dgn[index], u[index] = v, uv
    for array in (dgn, u):
        array.setflags(write=False)
    return DgnTable(energies, thicknesses, glandularities, dgn, u, table.header)


@dataclass(frozen=True)
class TomoTable:
    """Tomosynthesis t-factors :math:`t(E, T, \\theta)` at 50 % glandularity."""

    energies_kev: FloatArray
    thicknesses_mm: FloatArray
    angles_deg: FloatArray
    t: FloatArray  # (energies, thicknesses, angles), t(0) = 1 included
    header: dict[str, str] = field(repr=False)

    def at(self, thickness_mm: float, angle_deg: float) -> FloatArray:
        """t at every tabulated energy for one breast and one tube angle (linear in T and
        angle; t(-theta) = t(theta)).

        Raises
        ------
        ModelError
            Thickness or angle outside the table.
        """
        angle = abs(angle_deg)
        _check_inside("thickness", thickness_mm, self.thicknesses_mm, "mm", "t-factor table")
        _check_inside("tube angle", angle, self.angles_deg, "degrees", "t-factor table")
        interp = RegularGridInterpolator(
            (self.thicknesses_mm, self.angles_deg), np.moveaxis(self.t, 0, -1)
        )
        return np.asarray(interp([[thickness_mm, angle]])[0])


@functools.cache
def load_tomo_table() -> TomoTable:
    """The shipped t-factor table ``breast_tomo_t_mc.csv`` (read once, then cached)."""
    table = _package_table(TOMO_TABLE_FILE)
    points: dict[tuple[float, float, float], float] = {}
    for number, row in table.rows:
        where = f"{TOMO_TABLE_FILE} line {number}"
        key = (
            _number(row, "energy_kev", where),
            _number(row, "thickness_mm", where),
            _number(row, "tube_angle_deg", where),
        )
        points[key] = _number(row, "t", where)
    energies = _grid(k[0] for k in points)
    thicknesses = _grid(k[1] for k in points)
    for e in energies:  # t(0) = 1 by definition
        for t in thicknesses:
            points[(float(e), float(t), 0.0)] = 1.0
    angles = _grid(k[2] for k in points)
    shape = (energies.size, thicknesses.size, angles.size)
    if len(points) != math.prod(shape):
        raise ModelError(f"{TOMO_TABLE_FILE}: not a complete energy x thickness x angle grid")
    values = np.empty(shape)
    for (e, t, a), v in points.items():
        values[
            int(np.searchsorted(energies, e)),
            int(np.searchsorted(thicknesses, t)),
            int(np.searchsorted(angles, a)),
        ] = v
    values.setflags(write=False)
    return TomoTable(energies, thicknesses, angles, values, table.header)


# ---- official tables ----------------------------------------------------------------------------
@dataclass(frozen=True)
class OfficialCoefficients:
    """An imported coefficient table (layout in the module docstring).

    Attributes
    ----------
    title, source : str
        From the file header; recorded in every trail that uses the table.
    sha256 : str
        Of the file's bytes, to tell one version from another.
    header : dict of str to str
    g_points, c_points : dict
        ``(hvl_mm_al, thickness_mm) -> g`` and ``(hvl, thickness, glandularity %) -> c``.
    s_values : dict
        ``target/filter -> {thickness_mm or None: s}``.
    t_values : dict
        ``acquisition -> {thickness_mm: T}``.
    """

    title: str
    source: str
    sha256: str
    header: dict[str, str] = field(repr=False)
    g_points: dict[tuple[float, float], float] = field(repr=False)
    c_points: dict[tuple[float, float, float], float] = field(repr=False)
    s_values: dict[str, dict[float | None, float]] = field(repr=False)
    t_values: dict[str, dict[float | None, float]] = field(repr=False)

    def describe(self) -> str:
        """``"<title> (<source>; sha256 <first 12>)"`` for trails."""
        return f"{self.title} ({self.source}; sha256 {self.sha256[:12]})"

    def g(self, hvl_mm_al: float, thickness_mm: float) -> float | None:
        """g at an HVL and thickness, or None when the table has no g rows.

        Raises
        ------
        ModelError
            Outside the table's range.
        """
        if not self.g_points:
            return None
        return _interpolate_grid(self.g_points, (hvl_mm_al, thickness_mm), ("HVL", "thickness"))

    def c(self, hvl_mm_al: float, thickness_mm: float, glandularity: float) -> float | None:
        """c at an HVL, thickness and glandularity (fraction), or None without c rows."""
        if not self.c_points:
            return None
        return _interpolate_grid(
            self.c_points,
            (hvl_mm_al, thickness_mm, 100.0 * glandularity),
            ("HVL", "thickness", "glandularity"),
        )

    def s(self, target_filter: str, thickness_mm: float) -> float | None:
        """s of a target/filter (``"W/Rh"``), or None when the table does not list it."""
        by_t = _lookup_key(self.s_values, target_filter)
        if by_t is None:
            return None
        if None in by_t:
            return by_t[None]
        return _interpolate_1d(by_t, thickness_mm, f"s of {target_filter}")

    def tomo_factor(self, acquisition: str, thickness_mm: float) -> float | None:
        """T of a named acquisition, or None when the table does not list it."""
        by_t = _lookup_key(self.t_values, acquisition)
        if by_t is None:
            return None
        return _interpolate_1d(by_t, thickness_mm, f"T of {acquisition}")


def _lookup_key(
    table: dict[str, dict[float | None, float]], key: str
) -> dict[float | None, float] | None:
    wanted = key.strip().lower()
    for k, v in table.items():
        if k.lower() == wanted:
            return dict(v)
    return None


def _interpolate_1d(points: dict[float | None, float], x: float, what: str) -> float:
    xs = np.array(sorted(k for k in points if k is not None))
    ys = np.array([points[float(k)] for k in xs])
    if xs.size == 1:
        if abs(xs[0] - x) > 1e-9:
            raise ModelError(f"{what} is given at {xs[0]:g} mm only, not at {x:g} mm")
        return float(ys[0])
    _check_inside("thickness", x, xs, "mm", f"official table ({what})")
    return float(np.interp(x, xs, ys))


def _interpolate_grid(
    points: dict[tuple[float, float], float] | dict[tuple[float, float, float], float],
    at: tuple[float, ...],
    names: tuple[str, ...],
) -> float:
    axes = [np.array(sorted({k[i] for k in points})) for i in range(len(at))]
    values = np.empty(tuple(a.size for a in axes))
    for key, v in points.items():
        values[tuple(int(np.searchsorted(a, x)) for a, x in zip(axes, key, strict=True))] = v
    for name, axis, x in zip(names, axes, at, strict=True):
        _check_inside(name, x, axis, _AXES[name], "official table")
    # single-point axes are held fixed
    keep = [i for i, a in enumerate(axes) if a.size > 1]
    squeezed = values.reshape(tuple(a.size for a in axes if a.size > 1) or (1,))
    if not keep:
        return float(values.ravel()[0])
    interp = RegularGridInterpolator(tuple(axes[i] for i in keep), squeezed)
    return float(interp([[at[i] for i in keep]])[0])


def load_official_coefficients(path: str | Path) -> OfficialCoefficients:
    """Read an official coefficient table (layout in the module docstring).

    Raises
    ------
    ModelError
        Unreadable file, missing title or source, wrong columns, a bad value (with its line
        number), or g/c rows that do not form a complete grid.
    """
    p = Path(path)
    try:
        raw = p.read_bytes()
        text = raw.decode("utf-8-sig")
    except OSError as exc:
        raise ModelError(f"cannot read {p}: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise ModelError(f"{p} is not UTF-8 text") from None
    table = parse_described_csv(text, name=p.name)
    for key in ("title", "source"):
        if not table.header.get(key):
            raise ModelError(f"{p.name}: the header needs a '# {key}: ...' line")
    if table.columns != OFFICIAL_COLUMNS:
        raise ModelError(f"{p.name}: columns must be {','.join(OFFICIAL_COLUMNS)}")
    g_points: dict[tuple[float, float], float] = {}
    c_points: dict[tuple[float, float, float], float] = {}
    s_values: dict[str, dict[float | None, float]] = {}
    t_values: dict[str, dict[float | None, float]] = {}
    for number, row in table.rows:
        where = f"{p.name} line {number}"
        factor = row["factor"]
        value = _number(row, "value", where)
        if value <= 0.0:
            raise ModelError(f"{where}: value must be positive, got {value:g}")
        if factor == "g":
            g_points[(_number(row, "hvl_mm_al", where), _number(row, "thickness_mm", where))] = (
                value
            )
        elif factor == "c":
            c_points[
                (
                    _number(row, "hvl_mm_al", where),
                    _number(row, "thickness_mm", where),
                    _number(row, "glandularity_percent", where),
                )
            ] = value
        elif factor in ("s", "T"):
            if not row["key"]:
                raise ModelError(f"{where}: {factor} rows need a key")
            thickness = _number(row, "thickness_mm", where) if row["thickness_mm"] else None
            if factor == "s":
                s_values.setdefault(row["key"], {})[thickness] = value
            elif thickness is None:
                raise ModelError(f"{where}: T rows need a thickness_mm")
            else:
                t_values.setdefault(row["key"], {})[thickness] = value
        else:
            raise ModelError(f"{where}: factor {factor!r} is not g, c, s or T")
    for name, points, dims in (("g", g_points, 2), ("c", c_points, 3)):
        if points:
            sizes = [len({k[i] for k in points}) for i in range(dims)]
            if len(points) != math.prod(sizes):
                raise ModelError(f"{p.name}: the {name} rows do not form a complete grid")
    return OfficialCoefficients(
        title=table.header["title"],
        source=table.header["source"],
        sha256=hashlib.sha256(raw).hexdigest(),
        header=table.header,
        g_points=g_points,
        c_points=c_points,
        s_values=s_values,
        t_values=t_values,
    )


# ---- typical glandularity -----------------------------------------------------------------------
@dataclass(frozen=True)
class TypicalGlandularity:
    """A typical glandularity and how it was chosen."""

    glandularity: float  # mass fraction
    age_group: str
    note: str


@functools.cache
def _glandularity_table() -> tuple[FloatArray, FloatArray, FloatArray, str]:
    table = _package_table(GLANDULARITY_FILE)
    rows = [
        (
            _number(r, "thickness_mm", f"{GLANDULARITY_FILE} line {n}"),
            _number(r, "age_40_49_percent", f"{GLANDULARITY_FILE} line {n}"),
            _number(r, "age_50_64_percent", f"{GLANDULARITY_FILE} line {n}"),
        )
        for n, r in table.rows
    ]
    t, young, old = (np.array(c) for c in zip(*rows, strict=True))
    return t, young, old, table.header.get("source", GLANDULARITY_FILE)


def typical_glandularity(thickness_mm: float, age_years: float | None) -> TypicalGlandularity:
    """Typical glandularity of a breast of this compressed thickness (Dance et al. 2000).

    Parameters
    ----------
    thickness_mm : float
    age_years : float or None
        The woman's age; None takes the 50-64 group (the screening population).

    Returns
    -------
    TypicalGlandularity
        Linear interpolation in thickness; end values beyond the table, with a note.
    """
    t, young, old, _ = _glandularity_table()
    notes = []
    if age_years is None:
        column, group = old, "50-64"
        notes.append("age not known: the 50-64 group's typical glandularity")
    elif age_years < 50.0:
        column, group = young, "40-49"
        if age_years < 40.0:
            notes.append(f"age {age_years:g}: the 40-49 group's values (none below 40)")
    else:
        column, group = old, "50-64"
        if age_years >= 65.0:
            notes.append(f"age {age_years:g}: the 50-64 group's values (none above 64)")
    if not (t[0] <= thickness_mm <= t[-1]):
        notes.append(
            f"{thickness_mm:g} mm is outside the typical-glandularity table's "
            f"{t[0]:g}-{t[-1]:g} mm: its end value is used"
        )
    value = float(np.interp(thickness_mm, t, column)) / 100.0
    note = (
        f"typical glandularity {100 * value:.0f} % for a {thickness_mm:g} mm breast, age group "
        f"{group} (Dance et al. 2000, from memory)"
    )
    if notes:
        note += "; " + "; ".join(notes)
    return TypicalGlandularity(glandularity=max(value, 0.001), age_group=group, note=note)
