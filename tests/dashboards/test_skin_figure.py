"""The skin-dose map figure, on fig.data and fig.layout, and once in a real browser.

The record is invented (a patch of 4 Gy on the back of a 40 x 20 cm elliptical-cylinder
patient), shaped as beamaudit.model's SkinDoseMap.as_record() gives it.
"""

from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from peers import require_peer

from beamaudit.dashboards import CAUTION, TableError, build_skin_dose_map

PERIMETER_MM = 968.8
N_AROUND, N_ALONG = 96, 174


def make_record(peak_mgy: float = 4000.0) -> dict[str, Any]:
    cell = PERIMETER_MM / N_AROUND
    around = -PERIMETER_MM / 4 + (np.arange(N_AROUND) + 0.5) * cell
    along = (np.arange(N_ALONG) + 0.5) * 10.0
    # a round patch on the back, centred 5 cm to the patient's left of the spine, 70 cm down
    r2 = ((around[None, :] - 50.0) / 60.0) ** 2 + ((along[:, None] - 700.0) / 60.0) ** 2
    dose = peak_mgy * np.exp(-r2)
    i, j = np.unravel_index(np.argmax(dose), dose.shape)
    return {
        "peak_skin_dose_mgy": float(dose.max()),
        "isodose_levels_mgy": [2000.0, 3000.0, 5000.0],
        "peak": {
            "side": "back",
            "along_mm": float(along[i]),
            "around_mm": float(around[j]),
            "along_index": int(i),
            "around_index": int(j),
        },
        "uncertainty_pct": 48.0,
        "patient": {"height_mm": 1740.0},
        "map": {
            "around_mm": around.tolist(),
            "along_mm": along.tolist(),
            "dose_mgy": dose.tolist(),
            "perimeter_mm": PERIMETER_MM,
            "landmarks_mm": {"chest": 487.2},
        },
    }


def traces(fig, kind: str) -> list[Any]:
    return [t for t in fig.data if t.type == kind]


def test_back_and_front_panels_hold_half_the_cells_each() -> None:
    fig = build_skin_dose_map(make_record())
    back, front = traces(fig, "heatmap")
    assert np.asarray(back.z).shape == (N_ALONG, N_AROUND // 2)
    assert np.asarray(front.z).shape == (N_ALONG, N_AROUND // 2)
    assert (back.xaxis, front.xaxis) == ("x", "x2")
    assert back.showscale and not front.showscale
    assert back.colorbar.title.text == "Skin dose (Gy)"
    assert np.asarray(back.z).max() == pytest.approx(4.0, rel=0.02)  # Gy
    assert np.asarray(front.z).max() < 1e-3  # the patch's far tail only


def test_back_is_seen_from_behind_and_front_from_the_front() -> None:
    # the patch lies 5 cm to the patient's left of the spine: seen from behind the patient's left
    # is on the reader's left (negative x)
    fig = build_skin_dose_map(make_record())
    back = traces(fig, "heatmap")[0]
    z = np.asarray(back.z)
    x_peak = np.asarray(back.x)[np.argmax(z.max(axis=0))]
    assert x_peak == pytest.approx(-5.0, abs=1.1)
    assert "patient's right" in fig.layout.xaxis.title.text
    assert "patient's left" in fig.layout.xaxis2.title.text
    assert fig.layout.yaxis.autorange == "reversed"  # head at the top
    assert fig.layout.xaxis.scaleanchor == "y"  # true proportions


def test_isodose_lines_only_at_the_levels_reached() -> None:
    fig = build_skin_dose_map(make_record(4000.0))
    contours = traces(fig, "contour")
    assert sorted({c.contours.start for c in contours}) == [2.0, 3.0]
    assert all(c.contours.start == c.contours.end for c in contours)
    names = [c.name for c in contours if c.showlegend]
    assert any("3 Gy" in n and "NCRP 168" in n for n in names)
    low = build_skin_dose_map(make_record(1500.0))
    assert not traces(low, "contour")
    assert "No skin reached 2 Gy" in low.layout.annotations[-1].text


def test_peak_is_marked_with_its_dose() -> None:
    record = make_record()
    fig = build_skin_dose_map(record)
    (star,) = [t for t in traces(fig, "scatter") if t.marker.symbol == "star"]
    assert star.x[0] == pytest.approx(-5.0, abs=1.1) and star.y[0] == pytest.approx(70.0, abs=1.0)
    label = f"Peak {record['peak_skin_dose_mgy'] / 1000:.2f} Gy"
    assert any(a.text == label for a in fig.layout.annotations)


def test_outline_caution_and_uncertainty_are_shown() -> None:
    fig = build_skin_dose_map(make_record(), title="Skin-dose map")
    outlines = [t for t in traces(fig, "scatter") if "outline" in t.name]
    assert len(outlines) == 2 and max(outlines[0].y) == pytest.approx(174.0)
    text = fig.layout.annotations[-1].text
    assert CAUTION in text and "±48 % (k = 2)" in text
    assert fig.layout.title.text == "Skin-dose map"


def test_a_map_without_dose_says_so() -> None:
    record = make_record(0.0)
    record["peak"] = None
    fig = build_skin_dose_map(record)
    assert any("No dose reached the skin" in a.text for a in fig.layout.annotations)


@pytest.mark.parametrize(
    ("change", "match"),
    [
        (lambda r: r.pop("map"), "map: missing"),
        (lambda r: r["map"].update(dose_mgy=[[1.0, 2.0]]), "shape"),
        (lambda r: r["map"]["dose_mgy"][0].__setitem__(0, float("nan")), "finite"),
        (lambda r: r.pop("peak_skin_dose_mgy"), "missing or not a number"),
    ],
)
def test_bad_records_are_refused_with_the_key(change, match) -> None:
    record = copy.deepcopy(make_record())
    change(record)
    with pytest.raises(TableError, match=match):
        build_skin_dose_map(record)


CHROMIUM = Path("/usr/bin/chromium")
SCREENSHOTS = Path(__file__).resolve().parents[2] / "artifacts" / "screenshots"


@pytest.mark.peer
@pytest.mark.slow
def test_map_draws_in_chromium(tmp_path: Path) -> None:
    require_peer("Chromium", CHROMIUM.exists(), "apt-get install -y chromium")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        require_peer("playwright", False, "pip install -e '.[test]'")
        raise
    page_file = tmp_path / "skin.html"
    page_file.write_text(
        build_skin_dose_map(make_record(), title="Skin-dose map (invented)").to_html(
            include_plotlyjs=True
        ),
        encoding="utf-8",
    )
    with sync_playwright() as pw:
        browser = pw.chromium.launch(
            executable_path=str(CHROMIUM),
            headless=True,
            args=["--no-sandbox", "--disable-gpu", "--no-first-run"],
        )
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 900})
            errors: list[str] = []
            page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(page_file.as_uri(), wait_until="load")
            page.wait_for_selector("g.heatmaplayer image")
            assert page.locator("g.heatmaplayer image").count() == 2
            assert page.locator("g.contourlayer path").count() >= 1
            SCREENSHOTS.mkdir(parents=True, exist_ok=True)
            page.screenshot(path=str(SCREENSHOTS / "skin_dose_map.png"), full_page=True)
            assert errors == []
        finally:
            browser.close()
