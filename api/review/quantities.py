"""The dose quantities a review compares with reference levels, their units and unit conversions.

The quantity names are the column names of the events table (see :mod:`beamaudit.api.review.run`)
and carry their unit, as everywhere in beamaudit. :data:`QUANTITIES` is the one mapping from a
quantity's name to the stored column a review judges (``Quantity.column``) and to beamaudit's own
estimate of it (``Quantity.reconstructed_column``); the store's read, the exports, the REST routes
and the command line take the columns from here. Names that earlier versions wrote in level and
exam-type files (``ref_point_air_kerma_mgy``, ``agd_mgy``) are read as :data:`QUANTITY_ALIASES`
(:func:`quantity_name`). Which quantity serves which modality follows
ICRP Publication 135 (2017), table of DRL quantities (radiography K_a,e or P_KA; mammography D_G and
K_a,i or K_a,e; interventional fluoroscopy P_KA and K_a,r; CT CTDIvol and DLP).

Reference-level files may state a value in another unit of the same dimension (a national table in
mGy·cm² or cGy·cm², say); :func:`to_canonical_unit` converts it once, on import, so that the
stored value is always in the quantity's own unit. A unit that is not of the quantity's dimension is
an error, never guessed.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType

from beamaudit.api.review.errors import ReviewError

__all__ = [
    "QUANTITIES",
    "QUANTITY_ALIASES",
    "Quantity",
    "normalise_unit",
    "quantity_name",
    "to_canonical_unit",
]


@dataclass(frozen=True, slots=True)
class Quantity:
    """One dose quantity of a review.

    Attributes
    ----------
    name : str
        Column name in the events table, unit included (``"dap_gy_cm2"``).
    unit : str
        The unit values are stored in, as written in CSV files (ASCII, ``"Gy.cm2"``).
    display_unit : str
        The same unit for people (``"Gy·cm²"``).
    label : str
        A short name for sentences (``"DAP"``).
    description : str
        What the quantity is, with its ICRU symbol.
    column : str
        The column of ``exposure_events`` whose value a review judges: the reported value where
        the device reports the quantity, else beamaudit's reconstruction.
    reconstructed_column : str or None
        The column of beamaudit's own estimate of the quantity (``recon_*``), None where there
        is none.
    aliases : tuple of str
        Names earlier versions wrote for the quantity (read, never written).
    """

    name: str
    unit: str
    display_unit: str
    label: str
    description: str
    column: str = ""
    reconstructed_column: str | None = None
    aliases: tuple[str, ...] = ()


QUANTITIES: MappingProxyType[str, Quantity] = MappingProxyType(
    {
        q.name: q
        for q in (
            Quantity(
                "dap_gy_cm2",
                "Gy.cm2",
                "Gy·cm²",
                "DAP",
                "air kerma-area product P_KA (DAP, KAP)",
                column="dap_gy_cm2",
                reconstructed_column="recon_dap_gy_cm2",
            ),
            # no device reports K_a,e: the review judges beamaudit's reconstruction
            Quantity(
                "esak_mgy",
                "mGy",
                "mGy",
                "ESAK",
                "entrance surface air kerma K_a,e",
                column="recon_esak_mgy",
                reconstructed_column="recon_esak_mgy",
            ),
            Quantity(
                "reference_point_air_kerma_mgy",
                "mGy",
                "mGy",
                "K_a,r",
                "air kerma at the patient entrance reference point K_a,r (IEC 60601-2-43)",
                column="reference_point_air_kerma_mgy",
                aliases=("ref_point_air_kerma_mgy",),
            ),
            Quantity(
                "ctdivol_mgy",
                "mGy",
                "mGy",
                "CTDIvol",
                "volume CT air kerma index C_VOL",
                column="ctdivol_mgy",
            ),
            Quantity(
                "dlp_mgy_cm",
                "mGy.cm",
                "mGy·cm",
                "DLP",
                "CT air kerma-length product P_KL",
                column="dlp_mgy_cm",
            ),
            # the device's Average Glandular Dose is DICOM's Organ Dose of the breast
            Quantity(
                "mgd_mgy",
                "mGy",
                "mGy",
                "MGD",
                "mean glandular dose D_G",
                column="organ_dose_mgy",
                reconstructed_column="recon_mgd_mgy",
                aliases=("agd_mgy",),
            ),
        )
    }
)

#: Old name -> name, for level and exam-type files written by earlier versions.
QUANTITY_ALIASES: MappingProxyType[str, str] = MappingProxyType(
    {alias: q.name for q in QUANTITIES.values() for alias in q.aliases}
)


def quantity_name(name: str) -> str:
    """The quantity's name for ``name`` (an old name read as its alias); any other text as it is.

    >>> quantity_name("ref_point_air_kerma_mgy")
    'reference_point_air_kerma_mgy'
    """
    return QUANTITY_ALIASES.get(name, name)


# Factor that turns a value in the (normalised) unit on the left into the quantity's own unit.
# Plain SI prefixes: d = 1e-1, c = 1e-2, m = 1e-3, u = 1e-6; 1 m² = 1e4 cm².
_DAP_TO_GY_CM2 = MappingProxyType(
    {
        "gycm2": 1.0,
        "dgycm2": 0.1,
        "cgycm2": 0.01,
        "mgycm2": 1e-3,
        "ugycm2": 1e-6,
        "gym2": 1e4,
        "mgym2": 10.0,
        "ugym2": 0.01,
    }
)
_KERMA_TO_MGY = MappingProxyType({"mgy": 1.0, "gy": 1000.0, "cgy": 10.0, "ugy": 1e-3})
_DLP_TO_MGY_CM = MappingProxyType({"mgycm": 1.0, "gycm": 1000.0})

_CONVERSIONS = MappingProxyType(
    {
        "dap_gy_cm2": _DAP_TO_GY_CM2,
        "esak_mgy": _KERMA_TO_MGY,
        "reference_point_air_kerma_mgy": _KERMA_TO_MGY,
        "ctdivol_mgy": _KERMA_TO_MGY,
        "dlp_mgy_cm": _DLP_TO_MGY_CM,
        "mgd_mgy": _KERMA_TO_MGY,
    }
)


def normalise_unit(unit: str) -> str:
    """Spelling-insensitive form of a unit: ``"Gy·cm²"``, ``"Gy cm2"``, ``"Gy.cm^2"`` -> ``gycm2``.

    Separators (space, ``·``, ``*``, ``.``, ``^``) are dropped, ``µ``/``μ`` become ``u``, ``²``
    becomes ``2`` and the result is lower-cased (no dose unit here is ambiguous once lower-cased).
    """
    out = unit.strip().replace("µ", "u").replace("μ", "u").replace("²", "2")
    for sep in (" ", "·", "*", ".", "^", "⋅"):
        out = out.replace(sep, "")
    return out.lower()


def to_canonical_unit(quantity: str, value: float, unit: str) -> float:
    """Convert ``value`` given in ``unit`` to the own unit of ``quantity``.

    Parameters
    ----------
    quantity : str
        A key of :data:`QUANTITIES`.
    value : float
        The value as written.
    unit : str
        Its unit, in any spelling :func:`normalise_unit` understands.

    Returns
    -------
    float
        The value in ``QUANTITIES[quantity].unit``.

    Raises
    ------
    ReviewError
        Unknown quantity, or a unit that is not of the quantity's dimension.

    Examples
    --------
    >>> to_canonical_unit("dap_gy_cm2", 250.0, "mGy·cm²")
    0.25
    """
    if quantity not in QUANTITIES:
        raise ReviewError(
            f"unknown quantity {quantity!r}; known quantities: {', '.join(QUANTITIES)}"
        )
    table = _CONVERSIONS[quantity]
    factor = table.get(normalise_unit(unit))
    if factor is None:
        expected = QUANTITIES[quantity].unit
        raise ReviewError(
            f"unit {unit!r} is not a unit of {quantity} (expected {expected!r} or another unit "
            f"of the same dimension)"
        )
    return value * factor
