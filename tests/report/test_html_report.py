"""The HTML report: sections present exactly when their data are, one self-contained page,
byte-identical reruns, and a page that a real browser opens without errors.

Folders are made the way a user makes them: ``ctpore.analyze`` on a small phantom (48³ voxels,
anisotropic 12 × 10 × 10 µm) followed by ``ctpore rev``, ``coarsen`` and ``compare``; the batch
folder by :mod:`ctpore.batch.verdicts` from a hand-written pieces table.
Outside references: the HTML is parsed with the standard library's ``html.parser`` and opened in
headless Chromium (Debian's ``chromium``); embedded PNGs are decoded with Pillow and checked for
the PNG signature (ISO/IEC 15948:2004, section 5.2); SVG files are parsed as XML with the SVG
namespace (W3C SVG 1.1); ``data:`` URIs follow RFC 2397.
"""

from __future__ import annotations

import argparse
import base64
import html as html_module
import io
import json
import os
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from scipy import ndimage

from ctpore.errors import InputError
from ctpore.report.html import folder_kind, render_report, write_report

SPACING = (12.0, 10.0, 10.0)
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948:2004, 5.2
SVG_NS = "{http://www.w3.org/2000/svg}svg"  # W3C SVG 1.1 namespace

RESULT_SECTIONS = ["warnings", "summary", "threshold", "partial-volume", "uncertainty",
                   "slices", "thickness", "structure", "profiles", "cupping", "rev", "fields",
                   "comparison", "other-figures", "recipe", "provenance", "cautions"]
OPTIONAL_SECTIONS = {"uncertainty", "thickness", "structure", "profiles", "cupping", "rev",
                     "fields", "comparison"}
# "other-figures" holds PNG files of the folder that no section shows: none today, but a later
# version of analyze may add some, so its presence is not pinned.
BATCH_SECTIONS = ["batch", "verdicts", "batch-statistics", "pieces", "failures", "recipe",
                  "provenance", "cautions"]


# ----------------------------------------------------------------------------------------------
# folders


def phantom(shape=(48, 48, 48), cupping=0.15, seed=3):
    """An ellipsoidal piece with 18 spherical cells (walls ≥ 3 voxels) and one cell cut open
    at the skin; grey = 6000 (gas) / 26000 (solid) with the solid's contrast lowered by
    ``cupping·(1 − r²)`` toward the centre, blur σ 0.8 voxel, noise SD 800."""
    idx = np.indices(shape, dtype=float)
    c = [(n - 1) / 2 for n in shape]
    q = sum(((idx[i] - c[i]) / s) ** 2 for i, s in enumerate((18.0, 20.0, 20.0)))
    body = q <= 1.0
    pore = np.zeros(shape, bool)
    centres = [(z, y, x) for z in (-8, 8) for y in (-9, 0, 9) for x in (-9, 0, 9)]
    for (z, y, x), r in [(p, 3.8) for p in centres] + [((0, 0, 19), 4.5)]:
        pore |= ((idx[0] - c[0] - z) ** 2 + (idx[1] - c[1] - y) ** 2
                 + (idx[2] - c[2] - x) ** 2) <= r * r
    solid = body & ~pore
    grey = 6000.0 + 20000.0 * solid * (1.0 - cupping * (1.0 - np.clip(q, 0, 1)))
    grey = ndimage.gaussian_filter(grey, 0.8)
    grey += np.random.default_rng(seed).normal(0.0, 800.0, shape)
    return grey.astype(np.float32), body


@pytest.fixture(scope="module")
def full_result(tmp_path_factory):
    """A result with structure, profiles, cupping, uncertainty, REV, a field and a comparison."""
    from ctpore import analyze
    from ctpore.cli import main
    from ctpore.recipe import Recipe

    root = tmp_path_factory.mktemp("full")
    out = root / "piece"
    grey, body = phantom()
    recipe = (Recipe().replace("envelope", radius_um=60.0)
              .replace("corrections", cupping=True, uncertainty=True)
              # an unpuffed volume larger than the piece: an "inconsistent" warning
              .replace("sample", unpuffed_volume_mm3=0.1)
              .replace("rev", windows=60, sizes=5))  # a small study keeps the test fast
    analyze(grey, spacing_um=SPACING, recipe=recipe, out=out)
    assert main(["rev", str(out), "--quiet"]) == 0
    assert main(["coarsen", str(out), "--kernel", "box", "--width", "60um", "--quiet"]) == 0
    pts = np.argwhere(body)[::40] * np.asarray(SPACING)
    np.savetxt(root / "model.csv", np.column_stack([pts, np.full(len(pts), 0.3)]),
               delimiter=",", header="z,y,x,porosity", comments="")
    assert main(["compare", str(out), str(root / "model.csv"), "--length-unit", "um",
                 "--width", "60um", "--align", "none", "--quiet"]) == 0
    return out


@pytest.fixture(scope="module")
def full_report(full_result, tmp_path_factory):
    """The full result's report, written once beside (not inside) the result folder."""
    return write_report(full_result, out=tmp_path_factory.mktemp("report_a") / "report.html")


@pytest.fixture(scope="module")
def full_html(full_report):
    return full_report.read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def minimal_result(tmp_path_factory):
    """Porosity only: no structure, profiles, corrections or sub-folders."""
    from ctpore import analyze
    from ctpore.recipe import Recipe

    out = tmp_path_factory.mktemp("minimal") / "piece"
    grey, _ = phantom(shape=(40, 40, 40), cupping=0.0)
    recipe = (Recipe().replace("envelope", radius_um=60.0)
              .replace("structure", enabled=False).replace("profiles", enabled=False)
              .replace("rev", windows=60, sizes=5))
    analyze(grey, spacing_um=SPACING, recipe=recipe, out=out)
    return out


PIECES = {"A": [0.700, 0.710, 0.720, 0.705], "B": [0.800, 0.810, 0.790, 0.805],
          "C": [0.712, 0.708, 0.715, 0.703]}


@pytest.fixture(scope="module")
def batch_folder(tmp_path_factory, minimal_result):
    """A batch folder as ctpore batch leaves it, from a hand-written pieces table: batch B sits
    0.095 above the reference A (margin 0.03), C within 0.002 of it; one piece failed."""
    from ctpore.batch.runner import MARKER_NAME
    from ctpore.batch.verdicts import batch_report, write_batch_outputs
    from ctpore.io.result_folder import write_csv_rows

    out = tmp_path_factory.mktemp("batch") / "batch"
    (out / "pieces").mkdir(parents=True)
    (out / MARKER_NAME).write_text(json.dumps({"kind": "ctpore batch"}), encoding="utf-8")
    rows = []
    for batch, values in PIECES.items():
        for i, v in enumerate(values):
            sid = f"{batch.lower()}{i + 1}"
            rows.append({"sample_id": sid, "batch": batch, "status": "ok", "porosity_gas": v,
                         "porosity_open": v - 0.3 + 0.01 * i,
                         "result_folder": f"pieces/{sid}", "warnings": "", "error": ""})
    shutil.copytree(minimal_result, out / "pieces" / "a1")  # one real piece folder
    rows.append({"sample_id": "x1", "batch": "B", "status": "failed", "porosity_gas": "",
                 "porosity_open": "", "result_folder": "", "warnings": "",
                 "error": "InputError: broken.tif is not a TIFF"})
    cols = list(rows[0])
    write_csv_rows(out / "pieces.csv", cols, [[r[c] for c in cols] for r in rows])
    (out / "failures.json").write_text(json.dumps({"n_pieces": len(rows), "n_failed": 1,
                                                   "failures": [{"sample_id": "x1",
                                                                 "batch": "B",
                                                                 "stack_path": "broken.tif",
                                                                 "error": rows[-1]["error"]}]}),
                                       encoding="utf-8")
    report = batch_report(out, reference="A", margins={"porosity_gas": 0.03},
                          measures=["porosity_gas", "porosity_open"])
    write_batch_outputs(out, report)
    return out


# ----------------------------------------------------------------------------------------------
# parsing


class _Page(HTMLParser):
    """Section ids, src/href attributes, images and table rows (cell texts) per section."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.sections, self.urls, self.images, self.tags = [], [], [], []
        self.rows = {}  # section id -> list of rows (list of (text, class))
        self._section = None
        self._cell = None
        self._row = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append(tag)
        if tag == "section":
            self._section = a.get("id")
            self.sections.append(self._section)
            self.rows.setdefault(self._section, [])
        for key in ("src", "href"):
            if key in a:
                self.urls.append((tag, key, a[key]))
        if tag == "img":
            self.images.append(a.get("src", ""))
        if tag == "tr":
            self._row = []
        if tag in ("td", "th") and self._row is not None:
            self._cell = ["", a.get("class", "")]

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self._row.append(tuple(self._cell))
            self._cell = None
        if tag == "tr" and self._row is not None:
            self.rows[self._section].append(self._row)
            self._row = None
        if tag == "section":
            self._section = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell[0] += data


def parse(html: str) -> _Page:
    page = _Page()
    page.feed(html)
    page.close()
    return page


def decode_png(uri: str) -> bytes:
    head, _, payload = uri.partition(",")
    assert head == "data:image/png;base64"  # RFC 2397 form
    data = base64.b64decode(payload, validate=True)
    assert data[:8] == PNG_SIGNATURE
    return data


# ----------------------------------------------------------------------------------------------
# sections


def test_a_full_result_has_every_section_in_order(full_result, full_html):
    page = parse(full_html)
    assert [s for s in page.sections if s != "other-figures"] == \
        [s for s in RESULT_SECTIONS if s != "other-figures"]
    assert page.sections == [s for s in RESULT_SECTIONS if s in page.sections]
    summary = json.loads((full_result / "summary.json").read_text(encoding="utf-8"))
    warnings = [c[0] for r in page.rows["warnings"] for c in r]
    assert warnings == [] and any(w.startswith("inconsistent") for w in summary["warnings"])
    assert all(w in html_module.unescape(full_html) for w in summary["warnings"])
    # the numbers shown are those of summary.json
    rows = {r[0][0]: r[1][0] for r in page.rows["summary"] if len(r) > 1}
    assert rows["porosity_gas"].startswith(f"{summary['porosity_gas']:.4f} (band "
                                           f"{summary['threshold']['porosity_low']:.4f}")
    assert rows["porosity_partial_volume"].startswith(
        f"{summary['porosity_partial_volume']:.4f} ± ")
    pv = {r[0][0]: r[1][0] for r in page.rows["partial-volume"] if len(r) > 1}
    assert pv["segmented porosity_gas"] == f"{summary['porosity_gas']:.4f}"
    assert pv["partial-volume porosity"] == f"{summary['porosity_partial_volume']:.4f}"
    unc = {r[0][0]: r for r in page.rows["uncertainty"]}
    assert unc["porosity_gas"][2][0] == f"{summary['uncertainty']['porosity_gas_min']:.4f}"
    assert unc["porosity_gas"][3][0] == f"{summary['uncertainty']['porosity_gas_max']:.4f}"
    assert len([r for r in page.rows["uncertainty"] if r[1][0] in ("closing",
                                                                   "rolling_sphere")]) == 6
    comparison = json.loads((full_result / "compare_model" / "comparison.json").read_text())
    cmp_rows = {r[0][0]: r[1][0] for r in page.rows["comparison"] if len(r) > 1}
    assert cmp_rows["model points"] == str(comparison["n_points"])
    assert "cupping" in summary and "corrections.cupping" not in full_html  # no "not run" note
    # derived from the phantom's construction: the solid's contrast falls by up to 15 % toward
    # the centre, so the trend reads clearly negative before the correction and flat after it
    trend = {r[0][0]: float(r[1][0].rstrip(" %")) for r in page.rows["cupping"] if len(r) == 2
             and r[1][0].endswith("%")}
    assert trend["before correction"] < -5.0 and abs(trend["after correction"]) < 3.0


def test_sections_are_absent_without_their_data(minimal_result, tmp_path):
    page = parse(render_report(minimal_result))
    has_warnings = bool(json.loads((minimal_result / "summary.json").read_text())["warnings"])
    assert set(RESULT_SECTIONS) - set(page.sections) - {"other-figures"} == \
        OPTIONAL_SECTIONS | (set() if has_warnings else {"warnings"})
    assert [s for s in RESULT_SECTIONS if s in page.sections] == page.sections  # order kept
    # without the partial-volume keys and the slices figure, those sections go too
    copy = tmp_path / "edited"
    shutil.copytree(minimal_result, copy)
    summary = json.loads((copy / "summary.json").read_text(encoding="utf-8"))
    del summary["porosity_partial_volume"], summary["partial_volume"]
    summary["warnings"] = []
    (copy / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
    for p in (copy / "figures").glob("*.png"):
        if p.name != "threshold_histogram.png":
            p.unlink()
    (copy / "provenance.json").unlink()
    page = parse(render_report(copy))
    assert page.sections == ["summary", "threshold", "recipe", "cautions"]
    # a figure file that no section knows is still shown
    shutil.copy(minimal_result / "figures" / "slices.png", copy / "figures" / "new_view.png")
    page = parse(render_report(copy))
    assert page.sections == ["summary", "threshold", "other-figures", "recipe", "cautions"]
    assert decode_png(page.images[-1]) == (copy / "figures" / "new_view.png").read_bytes()


def test_profiles_without_cupping_correction_carry_a_note(full_result):
    from ctpore.report.blocks import FigureSet
    from ctpore.report.more_sections import cupping_section, profiles_section

    summary = json.loads((full_result / "summary.json").read_text(encoding="utf-8"))
    figures = FigureSet()
    with_cupping = profiles_section(full_result, summary, figures)
    del summary["cupping"]
    without = profiles_section(full_result, summary, figures)
    assert cupping_section(full_result, summary, figures) is None
    note = [b for b in without["blocks"] if b["kind"] == "note"]
    assert len(note) == 1 and "corrections.cupping = true" in note[0]["text"]
    assert not [b for b in with_cupping["blocks"] if b["kind"] == "note"]
    # the volume-weighted mean of the depth profile equals porosity_gas (the bins partition
    # the piece: user guide, section 13)
    check = [b["text"] for b in without["blocks"] if b["kind"] == "text"][0]
    assert f"{summary['porosity_gas']:.4f}, equals porosity_gas, " \
           f"{summary['porosity_gas']:.4f}" in check


def test_batch_folder_sections_and_verdicts(batch_folder):
    assert folder_kind(batch_folder) == "batch"
    html = render_report(batch_folder)
    page = parse(html)
    assert page.sections == BATCH_SECTIONS
    verdicts = json.loads((batch_folder / "verdicts.json").read_text(encoding="utf-8"))
    shown = {(r[0][0], r[1][0]): r[8] for r in page.rows["verdicts"] if len(r) == 10}
    # the expected verdicts of the hand-made table (TOST, Schuirmann 1987): B differs by
    # 0.095 > margin 0.03 with Welch p < 0.05; C lies within 0.002 of A
    assert verdicts["verdicts"]["B"]["porosity_gas"]["verdict"] == "different"
    assert verdicts["verdicts"]["C"]["porosity_gas"]["verdict"] == "equivalent"
    for batch, per_measure in verdicts["verdicts"].items():
        for measure, v in per_measure.items():
            assert shown[(batch, measure)][0] == v["verdict"]
    assert shown[("B", "porosity_gas")][1] == "v-different"
    assert shown[("C", "porosity_gas")][1] == "v-equivalent"
    pieces = [r for r in page.rows["pieces"] if r[0][0] != "sample"]
    assert [r[0][0] for r in pieces] == [f"{b.lower()}{i + 1}" for b in PIECES
                                         for i in range(4)] + ["x1"]
    assert "broken.tif" in " ".join(c[0] for r in page.rows["failures"] for c in r)
    n_figures = len(list((batch_folder / "figures").glob("batch_*.png")))
    assert n_figures >= 2 and len(page.images) == n_figures


def test_compare_folder_report(full_result):
    sub = full_result / "compare_model"
    assert folder_kind(sub) == "compare"
    page = parse(render_report(sub))
    assert page.sections == ["comparison", "recipe", "provenance", "cautions"]
    pngs = sorted(sub.glob("*.png"))
    assert len(pngs) >= 2 and len(page.images) == len(pngs)
    assert sorted(decode_png(src) for src in page.images) == sorted(p.read_bytes() for p in pngs)


def test_comparison_over_time_report(full_result, minimal_result, tmp_path):
    from ctpore.cli import main

    (tmp_path / "manifest.csv").write_text(f"time_s,result\n5,{minimal_result}\n"
                                           f"10,{full_result}\n", encoding="utf-8")
    (tmp_path / "curve.csv").write_text("time_s,porosity\n0,0.1\n5,0.3\n10,0.5\n15,0.6\n",
                                        encoding="utf-8")
    out = tmp_path / "over_time"
    assert main(["compare", str(tmp_path / "manifest.csv"), str(tmp_path / "curve.csv"),
                 "--out", str(out), "--quiet"]) == 0
    assert folder_kind(out) == "timeseries"
    page = parse(render_report(out))
    assert page.sections == ["comparison-over-time", "cautions"]
    data = json.loads((out / "comparison_timeseries.json").read_text(encoding="utf-8"))
    per_time = [r for r in page.rows["comparison-over-time"] if len(r) == 9][1:]
    assert [r[0][0] for r in per_time] == ["5", "10"]
    for row, t in zip(per_time, data["times"]):
        assert row[2][0] == f"{t['scan_porosity_gas']:.4f}"
        assert row[5][0] == f"{t['model_porosity']:.4f}"
    assert len(page.images) == len(list(out.glob("*.png"))) >= 1


# ----------------------------------------------------------------------------------------------
# a self-contained, reproducible page


def test_no_external_address_and_no_script(full_html):
    page = parse(full_html)
    assert "script" not in page.tags and "link" not in page.tags
    for tag, key, url in page.urls:
        if key == "href":
            assert url.startswith("#"), (tag, url)
        else:
            assert url.startswith("data:image/"), (tag, url[:40])
    assert "http://" not in full_html and "https://" not in full_html
    assert "url(" not in full_html  # no CSS resources
    assert "default-src 'none'" in full_html  # the page forbids loading anything


def test_figures_are_embedded(full_result, full_report, full_html):
    from PIL import Image

    page = parse(full_html)
    # every figure of the folder (the analysis' figures, profiles, REV, comparison) is embedded
    expected = [p for sub in ("figures", "profiles", "rev", "compare_model")
                for p in sorted((full_result / sub).glob("*.png"))
                if not p.name.startswith("report_")]  # (a report analyze may have written)
    assert {"threshold_histogram.png", "slices.png", "thickness_distributions.png",
            "depth.png", "rev_variance.png", "parity.png"} <= {p.name for p in expected}
    embedded = [decode_png(src) for src in page.images]
    for path in expected:
        assert path.read_bytes() in embedded, path.name
    for data in embedded:
        with Image.open(io.BytesIO(data)) as im:
            im.load()
            assert im.width > 100 and im.height > 100
    # the figures made for the report: embedded, and saved as PNG and SVG beside the report
    made = sorted((full_report.parent / "figures").glob("report_*.png"))
    assert {p.stem for p in made} >= {"report_porosity_estimates", "report_cupping",
                                      "report_thickness_cumulative", "report_field_1"}
    for png in made:
        assert png.read_bytes() in embedded
        assert ET.parse(png.with_suffix(".svg")).getroot().tag == SVG_NS
    assert len(embedded) == len(expected) + len(made)


def test_html_is_escaped(minimal_result, tmp_path):
    copy = tmp_path / "escaped"
    shutil.copytree(minimal_result, copy)
    summary = json.loads((copy / "summary.json").read_text(encoding="utf-8"))
    summary["warnings"] = ['<script>alert("x")</script> & <b>bold</b>']
    (copy / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
    html = render_report(copy)
    assert "<script>" not in html and "<b>bold" not in html
    assert "&lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt; &amp; &lt;b&gt;bold" in html


def test_byte_identical_reruns(full_result, full_report, tmp_path):
    again = write_report(full_result, out=tmp_path / "b" / "report.html")
    assert again.read_bytes() == full_report.read_bytes()
    names = sorted(p.name for p in (full_report.parent / "figures").iterdir())
    assert names and names == sorted(p.name for p in (again.parent / "figures").iterdir())
    for name in names:
        assert (full_report.parent / "figures" / name).read_bytes() == \
            (again.parent / "figures" / name).read_bytes(), name


def test_byte_identical_in_a_fresh_process(minimal_result, tmp_path):
    """No state of the process (matplotlib's id counters, rc settings) leaks into the bytes."""
    import matplotlib

    here = tmp_path / "here" / "report.html"
    with matplotlib.rc_context({"lines.linewidth": 7.0, "font.size": 23.0}):
        write_report(minimal_result, out=here)
    assert render_report(minimal_result) == here.read_text(encoding="utf-8")
    there = tmp_path / "there" / "report.html"
    code = ("import sys; from ctpore.report.html import write_report; "
            "write_report(sys.argv[1], out=sys.argv[2])")
    env = {k: v for k, v in os.environ.items() if k != "MPLBACKEND"}
    subprocess.run([sys.executable, "-c", code, str(minimal_result), str(there)], check=True,
                   env=env, timeout=300)
    assert here.read_bytes() == there.read_bytes()
    for p in sorted((here.parent / "figures").iterdir()):
        assert p.read_bytes() == (there.parent / "figures" / p.name).read_bytes(), p.name


# ----------------------------------------------------------------------------------------------
# writing and the command


def _args(*argv):
    from ctpore.report.command import add_report_parser

    parser = argparse.ArgumentParser()
    add_report_parser(parser.add_subparsers(dest="command"))
    return parser.parse_args(["report", *argv])


def test_command_writes_and_replaces_only_with_force(minimal_result, tmp_path, capsys):
    from ctpore.report.command import run_report

    folder = tmp_path / "piece"
    shutil.copytree(minimal_result, folder)
    (folder / "report.html").unlink(missing_ok=True)  # (in case analyze wrote one)
    assert run_report(_args(str(folder))) == 0
    path = folder / "report.html"
    assert path.is_file() and str(path) in capsys.readouterr().out
    assert (folder / "figures" / "report_porosity_estimates.svg").is_file()
    path.write_text("old", encoding="utf-8")
    with pytest.raises(InputError) as err:
        run_report(_args(str(folder)))
    assert str(path) in err.value.what and "--force" in err.value.fix
    assert path.read_text(encoding="utf-8") == "old"
    assert run_report(_args(str(folder), "--force", "--quiet")) == 0
    assert path.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert capsys.readouterr().out == ""
    assert not [p for p in folder.rglob("*partial*")]  # no temporary file left


def test_a_folder_that_is_not_a_ctpore_result_is_refused(tmp_path):
    (tmp_path / "stack.tif").write_bytes(b"II*\x00")
    for folder in (tmp_path, tmp_path / "missing"):
        with pytest.raises(InputError) as err:
            write_report(folder)
        assert str(folder) in err.value.what and "ctpore analyze" in err.value.fix
    assert not (tmp_path / "report.html").exists()
    (tmp_path / "summary.json").write_text("{not json", encoding="utf-8")
    with pytest.raises(InputError) as err:
        write_report(tmp_path)
    assert str(tmp_path / "summary.json") in err.value.what and "re-run" in err.value.fix


def test_the_destination_must_be_a_file(minimal_result, tmp_path):
    with pytest.raises(InputError, match="is a folder") as err:
        write_report(minimal_result, out=tmp_path)
    assert "--out" in err.value.fix


def test_contrast_trend_of_a_linear_profile():
    # derived: a profile whose contrast falls linearly by 20 % over the fitted depths gives
    # a straight-line change of exactly −0.2; bins too shallow or too sparse are left out
    from ctpore.report.report_figures import contrast_trend

    depth = np.arange(5.0, 300.0, 10.0)
    contrast = 1.0 - 0.2 * (depth - 25.0) / (depth[-1] - 25.0)
    median = 6000.0 + 20000.0 * contrast
    voxels = np.full(depth.size, 500)
    median[0], voxels[-1] = 99999.0, 5  # skin bin (< 2 voxels deep) and a sparse bin
    median[-1] = 0.0
    profile = {"depth_um": depth.tolist(), "solid_grey_median": median.tolist(),
               "solid_voxels": voxels.tolist()}
    change = contrast_trend(profile, gas_grey=6000.0, reference_grey=26000.0, voxel_um=10.0)
    span = (depth[-2] - depth[2]) / (depth[-1] - 25.0)
    assert change == pytest.approx(-0.2 * span, rel=1e-9)


# ----------------------------------------------------------------------------------------------
# a real browser

BROWSER_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                "--disable-component-update", "--no-first-run", "--disable-sync"]


def _browser_available():
    in_ci = os.environ.get("CI", "").strip().lower() in ("1", "true", "yes")
    if not Path("/usr/bin/chromium").exists() and not in_ci:
        pytest.skip("/usr/bin/chromium is not installed (Debian package chromium)")
    # in CI the browser test must run: a missing package fails here instead of skipping
    from playwright.sync_api import sync_playwright

    return sync_playwright


def test_report_opens_in_headless_chromium(full_report, batch_folder, tmp_path):
    sync_playwright = _browser_available()
    pages = {"result": full_report,
             "batch": write_report(batch_folder, out=tmp_path / "batch" / "report.html")}
    expected = {"result": RESULT_SECTIONS, "batch": BATCH_SECTIONS}
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path="/usr/bin/chromium", args=BROWSER_ARGS)
        try:
            for kind, path in pages.items():
                page = browser.new_page()
                errors, requests = [], []
                page.on("console", lambda m: errors.append(m.text) if m.type == "error"
                        else None)
                page.on("pageerror", lambda e: errors.append(str(e)))
                page.on("request", lambda r: requests.append(r.url))
                page.goto(path.as_uri(), wait_until="load")
                assert errors == [], (kind, errors)
                assert all(u.startswith(("file:", "data:")) for u in requests), requests
                ids = page.eval_on_selector_all("section[id]", "els => els.map(e => e.id)")
                assert [i for i in ids if i != "other-figures"] == \
                    [i for i in expected[kind] if i != "other-figures"]
                images = page.eval_on_selector_all(
                    "img", "els => els.map(e => [e.complete, e.naturalWidth])")
                assert images and all(ok and width > 0 for ok, width in images), images
                page.close()
        finally:
            browser.close()
