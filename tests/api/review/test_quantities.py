"""One name per quantity: the mapping to stored columns, and the names earlier versions wrote."""

from __future__ import annotations

import io

import pytest

from beamaudit.api.review.errors import CsvFormatError
from beamaudit.api.review.examtypes import CATALOGUE_COLUMNS, read_catalogue_csv
from beamaudit.api.review.levels import LEVEL_COLUMNS, read_levels_csv, write_levels_csv
from beamaudit.api.review.quantities import QUANTITIES, QUANTITY_ALIASES, quantity_name
from beamaudit.api.store import models as m

# a level file and a catalogue row as versions before the one-name change wrote them
_OLD_LEVELS = (
    ",".join(LEVEL_COLUMNS)
    + "\n"
    + "Local,local,1,2025-01-01,committee,xa_pci,ref_point_air_kerma_mgy,1.4,Gy,,\n"
    + "Local,local,1,2025-01-01,committee,mammo_cc,agd_mgy,2.0,mGy,,\n"
)
_OLD_CATALOGUE = (
    ",".join(CATALOGUE_COLUMNS)
    + "\n"
    + "xa_old,Old angiography,interventional,XA,examination,"
    + "dap_gy_cm2 ref_point_air_kerma_mgy,ref_point_air_kerma_mgy=max,,\n"
    + "mammo_old,Old mammography,mammography,MG,projection,agd_mgy esak_mgy,,,\n"
)


def test_every_quantity_names_a_stored_column_of_the_events() -> None:
    columns = set(m.ExposureEventRow.__table__.columns.keys())
    for q in QUANTITIES.values():
        assert q.column in columns, q.name
        assert q.reconstructed_column is None or q.reconstructed_column in columns, q.name


def test_reported_and_reconstructed_are_told_apart() -> None:
    # a reconstructed column is recon_ + the quantity's name, never the reported one's name
    for q in QUANTITIES.values():
        if q.reconstructed_column is not None:
            assert q.reconstructed_column == "recon_" + q.name
    assert QUANTITIES["esak_mgy"].column == "recon_esak_mgy"  # no device reports K_a,e
    assert QUANTITIES["mgd_mgy"].column == "organ_dose_mgy"  # DICOM's Organ Dose (0040,0316)


def test_old_names_are_aliases_and_no_alias_is_a_name() -> None:
    assert QUANTITY_ALIASES == {
        "ref_point_air_kerma_mgy": "reference_point_air_kerma_mgy",
        "agd_mgy": "mgd_mgy",
    }
    assert not set(QUANTITY_ALIASES) & set(QUANTITIES)
    assert quantity_name("agd_mgy") == "mgd_mgy"
    assert quantity_name("dap_gy_cm2") == "dap_gy_cm2"
    assert quantity_name("no_such_mgy") == "no_such_mgy"


def test_a_level_file_of_an_earlier_version_imports_under_the_new_names() -> None:
    (level_set,) = read_levels_csv(io.StringIO(_OLD_LEVELS))
    got = {(e.exam_type, e.quantity, e.value) for e in level_set.entries}
    assert got == {
        ("xa_pci", "reference_point_air_kerma_mgy", 1400.0),
        ("mammo_cc", "mgd_mgy", 2.0),
    }
    out = io.StringIO()
    write_levels_csv([level_set], out)
    assert "ref_point_air_kerma_mgy" not in out.getvalue()
    assert "agd_mgy" not in out.getvalue()


def test_an_exam_type_file_of_an_earlier_version_imports_under_the_new_names() -> None:
    catalogue = read_catalogue_csv(io.StringIO(_OLD_CATALOGUE))
    xa, mammo = catalogue.get("xa_old"), catalogue.get("mammo_old")
    assert xa is not None and mammo is not None
    assert xa.quantities == ("dap_gy_cm2", "reference_point_air_kerma_mgy")
    assert xa.aggregation_for("reference_point_air_kerma_mgy") == "max"
    assert mammo.quantities == ("mgd_mgy", "esak_mgy")


@pytest.mark.parametrize("old", sorted(QUANTITY_ALIASES))
def test_an_unknown_name_is_still_refused_with_the_known_ones(old: str) -> None:
    text = _OLD_LEVELS.replace(old, "kap_gy_cm2")
    with pytest.raises(CsvFormatError, match="quantity 'kap_gy_cm2' is not one of"):
        read_levels_csv(io.StringIO(text))
