"""Exported figures: files parse, have the requested size, keep labels as text, carry provenance.

Outside references: the PNG header and pHYs chunk read by Pillow (PIL), SVG parsed by
xml.etree.ElementTree, PDF parsed by pypdf, SHA-256 by hashlib, CSV by the csv module, and
matplotlib's own data limits (Axes.dataLim) for the drawn data ranges.
"""

import csv
import hashlib
import json
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from phasewake.core import __version__
from phasewake.core.figures.export import (
    PRESETS,
    ExportError,
    export_csv,
    export_figure,
    provenance_for,
    render_figure,
)
from phasewake.core.figures.spec import Axis, Band, FigureSpec, Image, Line, Mark, PlotSpec, series_style

CM = 2.54
PT_PER_INCH = 72.0


def _spec(n: int = 2000, *, marks: bool = True) -> FigureSpec:
    rng = np.random.default_rng(7)
    t = np.linspace(0.0, 50.0, n)
    e = -700.0 + 0.01 * t + rng.normal(0, 0.2, n)
    k = 300 + 10 * np.sin(t) + rng.normal(0, 3, n)
    items = [Line(t, e, label="total energy", style=series_style(0)),
             Line(t[::10], e[::10] + 0.5, label="every tenth", style=series_style(1, marker=True))]
    if marks:
        items += [Mark("vline", 20.0, label="cursor", role="cursor"),
                  Mark("hspan", -700.2, -699.8, label="band", role="state"),
                  Mark("text", 5.0, -699.5, label="note here")]
    p1 = PlotSpec(title="Total energy", x=Axis("Time", "ps"), y=Axis("Total energy", "kJ/mol"),
                  items=tuple(items), x_is_time=True)
    p2 = PlotSpec(title="Kinetic", x=Axis("Time", "ps"), y=Axis("Kinetic energy", "kJ/mol"),
                  items=(Band(t, k - 2, k + 2, label="band"), Line(t, k, label="kinetic", style=series_style(2))),
                  x_is_time=True, note="g = 12.3")
    return FigureSpec(key="test.energy", title="Test energies", plots=(p1, p2), caption="a caption",
                      provenance={"settings": {"window": "all"}})


@pytest.fixture
def input_file(tmp_path):
    p = tmp_path / "inputs" / "run.h5md"
    p.parent.mkdir()
    p.write_bytes(b"pretend trajectory bytes" * 100)
    return p


@pytest.mark.parametrize("preset", ["slide", "single", "double"])
@pytest.mark.slow  # measured 1.3 s of CPU
def test_png_has_requested_pixel_size_and_dpi(tmp_path, preset):
    from PIL import Image as PILImage  # Pillow reads the PNG header and pHYs chunk (reference)

    dpi = 150
    res = export_figure(_spec(), tmp_path / f"fig_{preset}.png", preset=preset, dpi=dpi)
    pr = PRESETS[preset]
    with PILImage.open(res.path) as im:
        w, h = im.size
        got_dpi = im.info["dpi"]
        text = dict(im.text)
    assert w == round(pr.width_cm / CM * dpi)
    assert (w, h) == (res.width_px, res.height_px)
    # PNG stores whole pixels per metre (PNG spec, pHYs chunk): 1 px/m = 0.0254 dpi of rounding
    assert got_dpi[0] == pytest.approx(dpi, abs=0.0254)
    if preset == "slide":  # 16:9 whatever the content
        assert w / h == pytest.approx(16 / 9, rel=0.01)
    prov = json.loads(text["phasewake-provenance"])
    assert prov["phasewake_version"] == __version__
    assert prov["figure"] == "test.energy"
    assert prov["export"] == {"format": "png", "preset": preset, "dpi": dpi}


def test_svg_parses_keeps_text_and_provenance(tmp_path, input_file):
    prov = provenance_for([input_file], settings={"coordinate": "distance(0, 1)"})
    res = export_figure(_spec(), tmp_path / "fig.svg", preset="double", provenance=prov)
    tree = ET.parse(res.path)  # parses as XML
    root = tree.getroot()
    # size in pt: 17 cm wide
    assert root.get("width").endswith("pt")
    assert float(root.get("width")[:-2]) == pytest.approx(17.0 / CM * PT_PER_INCH, rel=1e-3)
    texts = ["".join(el.itertext()) for el in root.iter("{http://www.w3.org/2000/svg}text")]
    joined = "\n".join(texts)
    for label in ("Time (ps)", "Total energy (kJ/mol)", "Kinetic energy (kJ/mol)", "g = 12.3"):
        assert label in joined
    desc = [el.text for el in root.iter("{http://purl.org/dc/elements/1.1/}description")]
    assert desc, "provenance missing from SVG metadata"
    meta = json.loads(desc[0])
    assert meta["inputs"][0]["sha256"] == hashlib.sha256(input_file.read_bytes()).hexdigest()
    assert meta["settings"] == {"coordinate": "distance(0, 1)"}


@pytest.mark.slow  # measured 1.9 s of CPU
def test_pdf_page_size_text_and_provenance(tmp_path, input_file):
    from pypdf import PdfReader  # reference PDF parser

    prov = provenance_for([input_file])
    res = export_figure(_spec(), tmp_path / "fig.pdf", preset="single", provenance=prov)
    reader = PdfReader(res.path)
    assert len(reader.pages) == 1
    box = reader.pages[0].mediabox
    assert float(box.width) == pytest.approx(8.5 / CM * PT_PER_INCH, abs=0.05)
    assert float(box.height) == pytest.approx(res.height_cm / CM * PT_PER_INCH, abs=0.05)
    text = reader.pages[0].extract_text()
    assert "Time (ps)" in text
    assert "Total energy (kJ/mol)" in text
    meta = json.loads(reader.metadata["/Subject"])
    assert meta["inputs"][0]["sha256"] == hashlib.sha256(input_file.read_bytes()).hexdigest()
    assert meta["inputs"][0]["size_bytes"] == input_file.stat().st_size
    assert __version__ in reader.metadata["/Creator"]


@pytest.mark.slow  # measured 1.7 s of CPU
def test_vector_exports_are_reproducible(tmp_path):
    spec = _spec(100, marks=False)
    for fmt in ("pdf", "svg"):
        a = export_figure(spec, tmp_path / f"a.{fmt}").path.read_bytes()
        b = export_figure(spec, tmp_path / f"b.{fmt}").path.read_bytes()
        assert a == b, fmt


@pytest.mark.parametrize("n", [300, 200_000])
def test_drawn_data_ranges_match_spec(n):
    # matplotlib's own bookkeeping of what it drew (Axes.dataLim) must equal the spec's data ranges,
    # also when a long series is reduced for drawing (its extremes must survive).
    spec = _spec(n, marks=False)
    rng = np.random.default_rng(3)
    xe = np.linspace(-1, 2, 31)
    ye = np.linspace(0.2, 0.9, 21)
    data = rng.random((30, 20))
    data[3, 4] = np.nan
    img = PlotSpec(title="density", x=Axis("q", "nm"), y=Axis("p", "amu nm/ps"),
                   items=(Image(data, xe, ye, colorbar_label="count"),))
    spec = FigureSpec(key=spec.key, title=spec.title, plots=spec.plots + (img,))
    fig = render_figure(spec, preset="double")
    axes = [ax for ax in fig.axes if ax.get_label() != "<colorbar>"]
    ranges = spec.data_ranges()
    assert len(axes) == len(ranges)
    for ax, ((x0, x1), (y0, y1)) in zip(axes, ranges):
        lim = ax.dataLim
        assert (lim.x0, lim.x1) == pytest.approx((x0, x1), rel=1e-9, abs=1e-12)
        assert (lim.y0, lim.y1) == pytest.approx((y0, y1), rel=1e-9, abs=1e-12)
        vx, vy = ax.get_xlim(), ax.get_ylim()
        assert vx[0] <= x0 + 1e-9 and vx[1] >= x1 - 1e-9
        assert vy[0] <= y0 + 1e-9 and vy[1] >= y1 - 1e-9


@pytest.mark.slow  # measured 1.1 s of CPU
def test_long_series_stays_small_in_vector_files(tmp_path):
    spec = _spec(400_000, marks=False)
    res = export_figure(spec, tmp_path / "long.pdf")
    assert res.path.stat().st_size < 3_000_000


def test_csv_holds_the_data_with_units(tmp_path):
    spec = _spec(200)
    path = export_csv(spec, tmp_path / "data.csv")
    lines = path.read_text(encoding="utf-8").splitlines()
    comments = [ln for ln in lines if ln.startswith("#")]
    assert any("Total energy (kJ/mol)" in c for c in comments)
    rows = list(csv.DictReader(ln for ln in lines if not ln.startswith("#")))
    line0 = [r for r in rows if r["plot"] == "0" and r["item"] == "0"]
    x0 = spec.plots[0].items[0].x
    y0 = spec.plots[0].items[0].y
    assert len(line0) == x0.size
    np.testing.assert_array_equal([float(r["x"]) for r in line0], x0)  # repr keeps every bit
    np.testing.assert_array_equal([float(r["y"]) for r in line0], y0)
    assert {r["x_unit"] for r in line0} == {"ps"} and {r["y_unit"] for r in line0} == {"kJ/mol"}
    band = [r for r in rows if r["kind"] == "band"]
    np.testing.assert_array_equal([float(r["y_hi"]) for r in band], spec.plots[1].items[0].hi)
    assert any(r["kind"] == "mark:vline" and float(r["x"]) == 20.0 for r in rows)


@pytest.mark.slow  # measured 0.5 s of CPU
def test_atomic_write_keeps_previous_file_on_failure(tmp_path):
    target = tmp_path / "fig.png"
    export_figure(_spec(100), target, dpi=50)
    before = target.read_bytes()
    bad = FigureSpec(key="bad", title="bad", plots=(PlotSpec(title="x", x=Axis("a"), y=Axis("b"),
                     items=(Line(np.arange(3.0), np.arange(4.0)),)),))
    with pytest.raises(ValueError):
        export_figure(bad, target, dpi=50)
    assert target.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fig.png"]  # no temporary file left over


def test_bad_requests_are_typed_errors(tmp_path):
    with pytest.raises(ExportError, match="format"):
        export_figure(_spec(10), tmp_path / "fig.bmp")
    with pytest.raises(ExportError, match="preset"):
        export_figure(_spec(10), tmp_path / "fig.png", preset="poster")
    with pytest.raises(ExportError, match="DPI"):
        export_figure(_spec(10), tmp_path / "fig.png", dpi=0)
    blocker = tmp_path / "afile"
    blocker.write_text("x")
    with pytest.raises(ExportError):
        export_figure(_spec(10), blocker / "fig.png")
