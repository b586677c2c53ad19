"""The skin-dose map as a static PNG (dashboards/skin_image.py).

The record is invented: the figure tests' round patch on the skin of a 40 x 20 cm
elliptical-cylinder patient, moved to peak on one cell, shaped as beamaudit.model's
SkinDoseMap.as_record() gives it. The PNG is read back with Pillow; the PNG
signature is the one of ISO/IEC 15948 (PNG), section 5.2.
"""

from __future__ import annotations

import io
from typing import Any

import numpy as np
import pytest
from PIL import Image
from test_skin_figure import N_ALONG, N_AROUND
from test_skin_figure import make_record as figure_record

from beamaudit.dashboards import TableError
from beamaudit.dashboards.skin_image import (
    SKIN_DOSE_PNG_SIZE_PX,
    SkinDoseImage,
    render_skin_dose_png,
)

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948 section 5.2
DARKEST = (0x2A, 0x1A, 0x4A)  # the top of the map's colour scale (dashboards/_skin_figure.py)


def make_record(*, around_index: int, along_index: int, peak_mgy: float = 4000.0) -> dict[str, Any]:
    """The figure tests' record with its patch moved to be centred on one cell."""
    record = figure_record(peak_mgy)
    around = np.asarray(record["map"]["around_mm"])
    along = np.asarray(record["map"]["along_mm"])
    r2 = ((around[None, :] - around[around_index]) / 40.0) ** 2 + (
        (along[:, None] - along[along_index]) / 40.0
    ) ** 2
    dose = peak_mgy * np.exp(-r2)
    assert np.count_nonzero(dose == dose.max()) == 1  # one cell holds the peak
    record["map"]["dose_mgy"] = dose.tolist()
    record["peak_skin_dose_mgy"] = float(dose.max())
    record["peak"] = {
        "along_mm": float(along[along_index]),
        "around_mm": float(around[around_index]),
        "along_index": along_index,
        "around_index": around_index,
    }
    return record


def decode(png: bytes) -> np.ndarray:
    with Image.open(io.BytesIO(png)) as image:
        image.verify()  # a valid PNG, chunk by chunk (CRCs)
    with Image.open(io.BytesIO(png)) as image:
        assert image.format == "PNG"
        assert image.size == SKIN_DOSE_PNG_SIZE_PX
        return np.asarray(image.convert("RGB"))


def darkest_centre(image: SkinDoseImage) -> tuple[float, float]:
    """Centre of the pixels of the scale's top colour inside the two panels (the colour bar
    beside them has that colour too)."""
    pixels = decode(image.png)
    inside = np.zeros(pixels.shape[:2], dtype=bool)
    for left, top, right, bottom in image.panels_px:
        inside[int(top) : int(bottom), int(left) : int(right)] = True
    ys, xs = np.nonzero(np.all(pixels == DARKEST, axis=-1) & inside)
    assert xs.size > 0, "no pixel of the scale's top colour"
    return float(xs.mean()), float(ys.mean())


@pytest.mark.parametrize(
    ("around_index", "along_index", "panel"),
    [
        (30, 50, "back"),  # the back, a little to the patient's left of the spine, chest height
        (70, 120, "front"),  # the front, toward the patient's right, thigh height
    ],
)
def test_the_png_is_valid_of_its_size_and_the_peak_is_drawn_on_the_maps_maximum(
    around_index: int, along_index: int, panel: str
) -> None:
    record = make_record(around_index=around_index, along_index=along_index)
    image = render_skin_dose_png(record, heading="Skin-dose map: patient P-TEST, exam 1")
    assert image.png.startswith(PNG_SIGNATURE)
    assert (image.width_px, image.height_px) == SKIN_DOSE_PNG_SIZE_PX
    x, y = darkest_centre(image)
    assert image.peak_px is not None
    # the ring's centre is the cell painted with the top of the scale (a cell is ~6 px wide)
    assert abs(image.peak_px[0] - x) < 3.0 and abs(image.peak_px[1] - y) < 3.0
    # back panel on the left, front on the right
    back, front = image.panels_px
    assert back[2] < front[0]
    box = back if panel == "back" else front
    assert box[0] <= x <= box[2] and box[1] <= y <= box[3]
    # further down the body is further down the page (the head at the top)
    assert (y > SKIN_DOSE_PNG_SIZE_PX[1] / 2) == (along_index > N_ALONG / 2)


def test_left_and_right_read_as_the_patient_frame_says() -> None:
    # around grows toward the patient's left (model/patient_model.py). Seen from behind the
    # patient's left is on the reader's left; seen from the front it is on the reader's right.
    spine = N_AROUND // 4  # around = 0 lies between cells 23 and 24
    back_left = darkest_centre(render_skin_dose_png(make_record(around_index=spine + 10,
                                                                along_index=60)))  # fmt: skip
    back_right = darkest_centre(render_skin_dose_png(make_record(around_index=spine - 10,
                                                                 along_index=60)))  # fmt: skip
    assert back_left[0] < back_right[0]
    front_mid = 3 * N_AROUND // 4  # around = P/2, the front's midline
    front_left = darkest_centre(render_skin_dose_png(make_record(around_index=front_mid - 10,
                                                                 along_index=60)))  # fmt: skip
    front_right = darkest_centre(render_skin_dose_png(make_record(around_index=front_mid + 10,
                                                                  along_index=60)))  # fmt: skip
    assert front_left[0] > front_right[0]


def test_a_map_with_no_dose_draws_no_peak() -> None:
    record = make_record(around_index=30, along_index=50)
    record["map"]["dose_mgy"] = np.zeros((N_ALONG, N_AROUND)).tolist()
    record["peak_skin_dose_mgy"], record["peak"] = 0.0, None
    image = render_skin_dose_png(record)
    assert image.peak_px is None
    decode(image.png)


def test_a_bad_record_is_refused_in_one_line() -> None:
    record = make_record(around_index=30, along_index=50)
    record["map"]["dose_mgy"] = [[1.0, 2.0]]
    with pytest.raises(TableError, match=r"^skin-dose map: map.dose_mgy: shape") as info:
        render_skin_dose_png(record)
    assert "\n" not in str(info.value)
