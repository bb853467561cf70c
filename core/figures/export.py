"""Draw a :class:`~phasewake.core.figures.spec.FigureSpec` with matplotlib and write it to disk.

One figure description, two renderers: the window draws a FigureSpec live with pyqtgraph, this module
draws the same description for files (PNG at a chosen DPI, SVG and PDF as vectors) so an export
matches the screen. pyqtgraph's own SVG exporter is broken with current Qt, which is why
exports go through matplotlib.

The drawing itself is :mod:`phasewake.core.figures.draw`; the sizes for a slide, a journal column or a
page width are the presets of :mod:`phasewake.core.figures.presets`. Axis labels stay searchable text.
Every file carries its provenance (input files with their SHA-256, phasewake version, settings) in its
metadata: PNG text chunks, the SVG ``<metadata>`` block (Dublin
Core description) and the PDF information dictionary (Subject). Files are drawn in memory, then written
atomically by ``core/store/atomic.py`` (a temporary file beside the target, then ``os.replace``).
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import os
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

import numpy as np

from phasewake.core import __version__
from phasewake.core.figures.draw import draw_into, figure_size_cm, mathtext, render_figure
from phasewake.core.figures.presets import (
    CM_PER_INCH,
    PRESETS,
    ExportError,
    Preset,
    get_preset,
    preset_rc,
    rc_params,
)
from phasewake.core.figures.spec import Band, FigureSpec, Image, Line, Mark
from phasewake.core.store.atomic import atomic_open, write_bytes
from phasewake.core.store.jsonable import to_jsonable

if TYPE_CHECKING:
    from matplotlib.figure import Figure

# drawing and presets live in draw.py and presets.py; their public names are importable from here too
__all__ = [
    "CM_PER_INCH", "CSV_COLUMNS", "FORMATS", "PRESETS", "ExportError", "ExportResult", "Preset", "check_writable",
    "draw_into", "export_all", "export_csv", "export_figure", "figure_png_bytes", "figure_size_cm", "file_metadata",
    "get_preset", "iter_data_rows", "mathtext", "preset_rc", "provenance_for", "provenance_json", "provenance_of_run",
    "rc_params", "render_figure", "save_matplotlib_figure", "sha256_file", "to_jsonable",
]

Format = Literal["png", "svg", "pdf"]
FORMATS: tuple[str, ...] = ("png", "svg", "pdf")


@dataclass(frozen=True)
class ExportResult:
    """What was written: path, format and the size in physical and pixel units."""

    path: Path
    format: str
    preset: str
    width_cm: float
    height_cm: float
    dpi: float
    width_px: int | None  # PNG only
    height_px: int | None
    provenance: dict[str, Any] = field(default_factory=dict)


# --------------------------------------------------------------------------------------------------
# provenance


_HASH_CACHE: dict[tuple[str, int, int], str] = {}


def sha256_file(path: str | Path, *, block_bytes: int = 1 << 20) -> str:
    """SHA-256 of a file, read in blocks (cached by path, size and modification time)."""
    p = Path(path)
    try:
        st = p.stat()
    except OSError as exc:
        raise ExportError(f"cannot read input file to hash it: {exc.strerror}", path=p) from exc
    key = (str(p.resolve()), st.st_size, st.st_mtime_ns)
    if key in _HASH_CACHE:
        return _HASH_CACHE[key]
    h = hashlib.sha256()
    with open(p, "rb") as fh:
        while chunk := fh.read(block_bytes):
            h.update(chunk)
    _HASH_CACHE[key] = h.hexdigest()
    return _HASH_CACHE[key]


def provenance_for(
    paths: Sequence[str | Path] = (),
    *,
    settings: Mapping[str, Any] | None = None,
    extra: Mapping[str, Any] | None = None,
) -> dict[str, Any]:
    """Provenance record: input files (by file name, never the absolute path: a figure sent to a
    colleague or a journal must not carry the folders of the machine it was made on) with their SHA-256
    and size, phasewake version, settings. The checksum identifies the input wherever it now lives.

    No time stamp is recorded, so exporting the same figure twice gives the same bytes (PDF and SVG
    dates are suppressed too).
    """
    import matplotlib

    files = []
    for p in paths:
        pp = Path(p)
        files.append({"file": pp.name, "sha256": sha256_file(pp), "size_bytes": pp.stat().st_size})
    out: dict[str, Any] = {
        "phasewake_version": __version__,
        "matplotlib_version": matplotlib.__version__,
        "numpy_version": np.__version__,
        "inputs": files,
        "settings": to_jsonable(dict(settings or {})),
    }
    if extra:
        out.update(to_jsonable(dict(extra)))
    return out


def provenance_of_run(run: Any, *, settings: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Provenance of a :class:`~phasewake.core.model.run.Run`: its files (hashed) and the run name."""
    paths = [p for p in getattr(run, "paths", ()) if Path(p).is_file()]
    return provenance_for(paths, settings=settings, extra={"run": getattr(run, "name", "")})


def provenance_json(prov: Mapping[str, Any]) -> str:
    return json.dumps(to_jsonable(prov), sort_keys=True, separators=(",", ":"))


def _merged_provenance(spec: FigureSpec, provenance: Mapping[str, Any] | None) -> dict[str, Any]:
    prov: dict[str, Any] = {"figure": spec.key}
    prov.update(to_jsonable(dict(spec.provenance)))
    if provenance:
        prov.update(to_jsonable(dict(provenance)))
    prov.setdefault("phasewake_version", __version__)
    return prov


# --------------------------------------------------------------------------------------------------
# writing goes through the project's one atomic writer (core/store/atomic.py): figures are drawn into memory
# first, so a full disk meets a plain write (OutputError, the old file intact), never a half-drawn file


def check_writable(path: Path) -> None:
    parent = path.parent if str(path.parent) else Path(".")
    if parent.exists() and not parent.is_dir():
        raise ExportError("the folder to write into is a file", path=parent)
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ExportError(f"cannot create the output folder: {exc.strerror}", path=parent) from exc
    if not os.access(parent, os.W_OK):
        raise ExportError("the output folder is not writable", path=parent)



# --------------------------------------------------------------------------------------------------
# writing


def _format_of(path: Path, fmt: str | None) -> str:
    f = (fmt or path.suffix.lstrip(".")).lower()
    if f not in FORMATS:
        raise ExportError(f"unknown figure format {f!r}; choose one of {', '.join(FORMATS)}", path=path)
    return f


def file_metadata(fmt: str, title: str, prov: Mapping[str, Any]) -> dict[str, Any]:
    text = provenance_json(prov)
    software = f"phasewake {__version__}"
    if fmt == "png":  # PNG tEXt chunks: any keyword
        return {"Title": title, "Software": software, "Description": text, "phasewake-provenance": text}
    if fmt == "svg":  # Dublin Core fields inside <metadata>
        return {"Title": title, "Creator": software, "Description": text, "Date": None}
    return {"Title": title, "Creator": software, "Subject": text, "Keywords": "phasewake provenance JSON in Subject",
            "CreationDate": None}


def save_matplotlib_figure(fig: Figure, path: str | Path, *, fmt: str | None = None, dpi: float = 200.0,
                           title: str = "", provenance: Mapping[str, Any] | None = None,
                           preset: str | Preset = "slide") -> Path:
    """Save a matplotlib figure atomically with provenance metadata and text kept as text."""

    target = Path(path)
    f = _format_of(target, fmt)
    check_writable(target)
    meta = file_metadata(f, title, provenance or {})
    buf = io.BytesIO()
    with preset_rc(get_preset(preset)):
        fig.savefig(buf, format=f, dpi=dpi, metadata=meta)
    write_bytes(target, buf.getbuffer())
    return target


def export_figure(
    spec: FigureSpec,
    path: str | Path,
    *,
    fmt: str | None = None,
    preset: str | Preset = "slide",
    dpi: float = 200.0,
    provenance: Mapping[str, Any] | None = None,
) -> ExportResult:
    """Write ``spec`` as PNG, SVG or PDF (format from ``fmt`` or the file suffix).

    Parameters
    ----------
    spec : FigureSpec
    path : file to write (replaced atomically; its folder is created if needed)
    fmt : "png", "svg" or "pdf"; default from the suffix of ``path``
    preset : "slide", "single", "double" or a :class:`Preset`
    dpi : dots per inch of a PNG (also the raster resolution of rasterised parts of vector files)
    provenance : extra provenance (e.g. :func:`provenance_of_run`); merged over ``spec.provenance``

    Returns
    -------
    ExportResult
        With the physical size in cm and, for PNG, the size in pixels.
    """
    if not (dpi > 0 and math.isfinite(dpi)):
        raise ExportError(f"DPI must be a positive number, not {dpi!r}", path=path)
    target = Path(path)
    f = _format_of(target, fmt)
    pr = get_preset(preset)
    prov = _merged_provenance(spec, provenance)
    prov["export"] = {"format": f, "preset": pr.name, "dpi": float(dpi)}
    fig = render_figure(spec, preset=pr)
    w_in, h_in = fig.get_size_inches()
    wpx = hpx = None
    if f == "png":
        # whole pixels: the canvas truncates w * dpi, so aim a hair above the rounded pixel count
        wpx, hpx = int(round(w_in * dpi)), int(round(h_in * dpi))
        fig.set_size_inches((wpx + 1e-4) / dpi, (hpx + 1e-4) / dpi)
    save_matplotlib_figure(fig, target, fmt=f, dpi=dpi, title=spec.title, provenance=prov, preset=pr)
    return ExportResult(path=target, format=f, preset=pr.name, width_cm=float(w_in * CM_PER_INCH),
                        height_cm=float(h_in * CM_PER_INCH), dpi=float(dpi), width_px=wpx, height_px=hpx,
                        provenance=prov)


def figure_png_bytes(spec: FigureSpec, *, preset: str | Preset = "double", dpi: float = 110.0) -> bytes:
    """PNG bytes of ``spec`` (for HTML reports and quick previews)."""

    pr = get_preset(preset)
    fig = render_figure(spec, preset=pr)
    buf = io.BytesIO()
    with preset_rc(pr):
        fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


# --------------------------------------------------------------------------------------------------
# data as CSV

CSV_COLUMNS = ("plot", "item", "kind", "label", "x", "y", "y_lo", "y_hi", "value", "x_unit", "y_unit")


def iter_data_rows(spec: FigureSpec) -> Iterator[dict[str, Any]]:
    """Every data point of ``spec`` as a row (long format: one row per point, mark or image cell).

    Columns: plot (index), item (index within the plot), kind (line/scatter/step/bar/band/image/
    mark:<kind>), label, x, y, y_lo, y_hi (bands), value (image cells), x_unit, y_unit.
    Step and bar items given by bin edges report the bin centres as x.
    """
    for ip, plot in enumerate(spec.plots):
        xu, yu = plot.x.unit, plot.y.unit
        for ii, item in enumerate(plot.items):
            base = {"plot": ip, "item": ii, "x_unit": xu, "y_unit": yu, "label": getattr(item, "label", "")}
            if isinstance(item, Line):
                x = np.asarray(item.x, float).ravel()
                y = np.asarray(item.y, float).ravel()
                if x.size == y.size + 1:
                    x = 0.5 * (x[1:] + x[:-1])
                for a, b in zip(x, y):
                    yield {**base, "kind": item.kind, "x": a, "y": b}
            elif isinstance(item, Band):
                for a, lo, hi in zip(np.asarray(item.x, float).ravel(), np.asarray(item.lo, float).ravel(),
                                     np.asarray(item.hi, float).ravel()):
                    yield {**base, "kind": "band", "x": a, "y_lo": lo, "y_hi": hi}
            elif isinstance(item, Image):
                xe = np.asarray(item.x_edges, float)
                ye = np.asarray(item.y_edges, float)
                xc = 0.5 * (xe[1:] + xe[:-1])
                yc = 0.5 * (ye[1:] + ye[:-1])
                data = np.asarray(item.data, float)
                for i in range(data.shape[0]):
                    for j in range(data.shape[1]):
                        yield {**base, "kind": "image", "x": xc[i], "y": yc[j], "value": data[i, j]}
            elif isinstance(item, Mark):
                row = {**base, "kind": f"mark:{item.kind}", "x": item.value}
                if item.kind in ("hline", "hspan"):
                    row = {**base, "kind": f"mark:{item.kind}", "y": item.value,
                           "y_hi": item.value2 if item.value2 is not None else ""}
                elif item.value2 is not None:
                    row["y" if item.kind in ("point", "text") else "y_hi"] = item.value2
                yield row


def _fmt(v: Any) -> str:
    if v is None or v == "":
        return ""
    if isinstance(v, float | np.floating):
        return repr(float(v)) if math.isfinite(float(v)) else ("nan" if v != v else str(float(v)))
    return str(v)


def export_csv(spec: FigureSpec, path: str | Path, *, provenance: Mapping[str, Any] | None = None) -> Path:
    """Write the data of ``spec`` as CSV (see :func:`iter_data_rows`), atomically.

    Comment lines starting with ``#`` come first: the figure key and title, each plot's axes with
    units, and the provenance JSON.
    """
    target = Path(path)
    check_writable(target)
    prov = _merged_provenance(spec, provenance)
    with atomic_open(target, "w", encoding="utf-8", newline="") as fh:
        fh.write(f"# phasewake {__version__} figure data: {spec.key}: {spec.title}\n")
        for ip, plot in enumerate(spec.plots):
            fh.write(f"# plot {ip}: {plot.title}; x = {plot.x.text}; y = {plot.y.text}\n")
        fh.write(f"# provenance: {provenance_json(prov)}\n")
        w = csv.writer(fh)
        w.writerow(CSV_COLUMNS)
        for row in iter_data_rows(spec):
            w.writerow([_fmt(row.get(c, "")) for c in CSV_COLUMNS])
    return target


def export_all(spec: FigureSpec, stem: str | Path, *, formats: Sequence[str] = ("png", "pdf"),
               preset: str | Preset = "slide", dpi: float = 200.0,
               provenance: Mapping[str, Any] | None = None, csv_data: bool = False) -> list[Path]:
    """Write ``spec`` in several formats beside each other: ``stem.png``, ``stem.pdf``, ..."""
    stem = Path(stem)
    out = []
    for f in formats:
        res = export_figure(spec, stem.with_name(stem.name + "." + f), fmt=f, preset=preset, dpi=dpi,
                            provenance=provenance)
        out.append(res.path)
    if csv_data:
        out.append(export_csv(spec, stem.with_name(stem.name + ".csv"), provenance=provenance))
    return out
