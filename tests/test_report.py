"""The study report page and the figures it shows."""

import base64
import json
import io
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from test_cohort import make_study

from skelmorph.cli import main
from skelmorph.cohort.compare import compare_cohort
from skelmorph.cohort.run import run_cohort
from skelmorph.report.figures import (new_axes, plot_embedding, plot_group_values,
                                      profile_bands)
from skelmorph.report.html import write_report


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("report")
    manifest = make_study(tmp / "data", per_group=3, size=40.0)
    run_cohort(manifest, tmp / "study", {"n_radii": 30, "figures": False}, progress=False)
    (tmp / "data" / "intact2.tif").write_bytes(b"not an image")  # one failure shows up
    run_cohort(manifest, tmp / "study", {"n_radii": 30, "figures": False, "seed": 1},
               progress=False)
    compare_cohort(tmp / "study", n_repeats=2, n_permutations=10)
    page = write_report(tmp / "study")
    return tmp / "study", page


def test_page_is_self_contained(study):
    """No outside resources, no scripts, every figure present and decodable."""
    from matplotlib.image import imread
    folder, page = study
    text = page.read_text()
    assert "<script" not in text.lower()
    outside = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", text)  # embedded figures
    assert not re.search(r"(https?:)?//[a-z0-9]", outside, re.I), "external URL in the page"
    sources = re.findall(r"src=['\"]([^'\"]+)['\"]", text)
    assert len(sources) >= 6
    for src in sources:
        assert not src.startswith("/") and ".." not in src
        # Figures are embedded, so the page works copied alone.
        assert src.startswith("data:image/png;base64,")
        img = imread(io.BytesIO(base64.b64decode(src.split(",", 1)[1])), format="png")
        assert img.shape[0] > 0 and img.shape[1] > 0
    for section in ("Headline findings", "Caution", "The study", "Measures by group",
                    "Radial profiles", "Barcodes", "Distances between samples", "Embeddings",
                    "Samples", "Methods", "References"):
        assert section in text, section
    # Headline first, then the caution, then the study.
    assert text.index("Headline findings") < text.index("Caution") < text.index("The study")
    assert "not a diagnosis" in text
    assert "Failed samples" in text and "intact2" in text


def _read_number(text):
    """A number as the page writes it for people: '10,190', '4.6 × 10⁻⁴'."""
    sup = str.maketrans("⁻⁰¹²³⁴⁵⁶⁷⁸⁹", "-0123456789")
    text = text.replace(",", "")
    if " × 10" in text:
        mantissa, exponent = text.split(" × 10")
        return float(mantissa) * 10.0 ** int(exponent.translate(sup))
    return float(text)


def test_number_formatting_reads_back():
    from skelmorph.results import format_value
    for x in (0.000462, 10190.45, 3.5e7, -0.25, 12.0, 0.0099):
        assert _read_number(format_value(x)) == pytest.approx(x, rel=5e-3)


def test_headline_numbers_equal_comparison(study):
    folder, page = study
    comp = json.loads((folder / "comparison.json").read_text())
    text = page.read_text()
    shown = {k: _read_number(v) for k, v in re.findall(r'data-key="([^"]+)">([^<]+)<', text)}
    for key in ("cv_accuracy", "cv_accuracy_sd", "permutation_p", "cv_accuracy_baseline"):
        assert float(shown[key]) == pytest.approx(comp[key], rel=5e-3, abs=1e-9)  # 3 digits shown
    for name, w in comp["weights"].items():
        assert float(shown[f"weight:{name}"]) == pytest.approx(w, abs=0.006)
    for m in comp["significant_measures"][:10]:
        assert float(shown[f"q:{m}"]) == pytest.approx(comp["measures"][m]["q"], rel=5e-3)


def test_profile_bands_are_quantiles(study):
    """Band limits equal the 25th/75th percentiles of the interpolated
    curves, computed here independently (numpy)."""
    folder, _ = study
    prof = pd.read_csv(folder / "profiles.csv", dtype={"sample": str})
    cohort = pd.read_csv(folder / "cohort.csv", dtype={"sample": str})
    label_of = dict(zip(cohort["sample"], cohort["group"]))
    bands = profile_bands(prof, label_of, "crossings", n_grid=50)
    grid = np.linspace(0, prof["radius"].max(), 50)
    for g, (x, lo, med, hi) in bands.items():
        curves = []
        for s in cohort["sample"][cohort["group"] == g]:
            p = prof[prof["sample"] == s].sort_values("radius")
            curves.append(np.interp(grid, p["radius"], p["crossings"]))
        np.testing.assert_allclose(lo, np.percentile(curves, 25, axis=0))
        np.testing.assert_allclose(hi, np.percentile(curves, 75, axis=0))
        np.testing.assert_allclose(med, np.median(curves, axis=0))


def test_thumbnail_colour_scale(tmp_path):
    """The gallery picture covers the graph's radius range (pyvista when it can
    render here, matplotlib otherwise) and is a readable PNG."""
    from matplotlib.image import imread

    import skelmorph as sm
    from skelmorph.report.html import render_thumbnail
    ph = sm.phantoms.make("lattice")
    g = sm.skeleton_graph(ph.mask, ph.spacing)
    lo, hi = render_thumbnail(g, tmp_path / "t.png")
    assert (lo, hi) == (g.point_radius.min(), g.point_radius.max())
    assert imread(tmp_path / "t.png").shape[0] > 100


def test_plot_functions_return_what_they_draw():
    fig, ax = new_axes(2)
    vals = np.array([1.0, 2.0, 3.0, 10.0, np.nan])
    drawn = plot_group_values(vals, ["a", "a", "b", "b", "b"], ax[0, 0], "m", q=0.01)
    np.testing.assert_array_equal(drawn["a"], [1, 2])
    np.testing.assert_array_equal(drawn["b"], [3, 10])
    xy = np.arange(8.0).reshape(4, 2)
    got = plot_embedding(xy, ["p", "q", "p", "q"], ax[0, 1], "t")
    np.testing.assert_array_equal(got["p"], xy[[0, 2]])


def test_cli_report_and_sample_page(tmp_path, study, capsys):
    folder, _ = study
    assert main(["cohort", "report", str(folder), "--out", str(tmp_path / "r" / "page.html"),
                 "--gallery", "2"]) == 0
    page = tmp_path / "r" / "page.html"
    assert page.exists() and (tmp_path / "r" / "figures" / "measures.png").exists()
    assert main(["phantom", "venation", "--out", str(tmp_path / "v.tif")]) == 0
    assert main(["analyze", str(tmp_path / "v.tif"), "--out", str(tmp_path / "a"), "--quiet",
                 "--report", "--n-radii", "20"]) == 0
    text = (tmp_path / "a" / "report.html").read_text()
    assert "not a diagnosis" in text and "data:image/png;base64," in text  # graph embedded
    assert (tmp_path / "a" / "figures" / "graph.png").stat().st_size > 1000


def _chromium():
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


@pytest.mark.skipif(_chromium() is None, reason="no chromium on this machine (.ci/run installs it)")
def test_page_in_a_real_browser(study, tmp_path):
    """Headless chromium loads the page with no console errors and saves a
    full-page screenshot (kept in the test's temporary folder)."""
    _, built = study
    alone = tmp_path / "alone"  # the page copied alone to an empty folder
    alone.mkdir()
    page = alone / "report.html"
    shutil.copy(built, page)
    shot = tmp_path / "report.png"
    proc = subprocess.run(
        [_chromium(), "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
         "--enable-logging=stderr", "--v=0", "--window-size=1200,6000",
         f"--screenshot={shot}", page.resolve().as_uri()],
        capture_output=True, text=True, timeout=120)
    assert shot.exists() and shot.stat().st_size > 10000, proc.stderr[-2000:]
    console = [line for line in proc.stderr.splitlines() if "CONSOLE" in line or "Uncaught" in line]
    assert not console, console
    from matplotlib.image import imread
    img = imread(shot)
    assert img.shape[0] >= 1000 and img[..., :3].std() > 0.01  # not a blank page
    # Every figure decodes in the browser: a copy of the page beside it, with a
    # script added after load that records each image's natural size in the DOM.
    probe = page.with_name("browser-check.html")
    script = ("<script>window.addEventListener('load',function(){var r=[];"
              "for(const i of document.images){r.push(i.naturalWidth+'x'+i.naturalHeight)}"
              "document.body.setAttribute('data-sizes',r.join(' '))})</script>")
    probe.write_text(page.read_text().replace("</body>", script + "</body>"))
    dom = subprocess.run([_chromium(), "--headless", "--no-sandbox", "--disable-gpu",
                          "--virtual-time-budget=10000", "--dump-dom", probe.resolve().as_uri()],
                         capture_output=True, text=True, timeout=120).stdout
    probe.unlink()
    sizes = re.search(r'data-sizes="([^"]*)"', dom).group(1).split()
    assert len(sizes) == len(re.findall(r"<img ", page.read_text()))
    assert all(int(w) > 0 and int(h) > 0 for w, h in (x.split("x") for x in sizes)), sizes
    artifacts = Path(__file__).parent / "artifacts"
    artifacts.mkdir(exist_ok=True)
    shutil.copy(shot, artifacts / "report.png")


def test_report_on_a_comparison_written_elsewhere(study, tmp_path):
    # 'cohort compare --out X' then 'cohort report X': the comparison names
    # its study folder, so the page finds the samples.
    folder, _ = study
    other = tmp_path / "cmp"
    assert main(["cohort", "compare", str(folder), "--out", str(other), "--permutations", "5",
                 "--repeats", "1"]) == 0
    assert main(["cohort", "report", str(other)]) == 0
    text = (other / "report.html").read_text()
    assert "Headline findings" in text and "data:image/png;base64," in text
    empty = tmp_path / "empty"
    empty.mkdir()
    assert main(["cohort", "report", str(empty)]) == 2


def test_gallery_shows_modelled_flow_on_one_scale(tmp_path):
    """Samples analysed with the vessel set get a second picture coloured by
    the flow model, all on one log colour scale (the 1st-99th percentile of
    the positive branch flows of the samples shown)."""
    import json
    manifest = make_study(tmp_path / "data", per_group=2, size=40.0)
    run_cohort(manifest, tmp_path / "study", {"n_radii": 0, "figures": False,
                                              "measures": ["vessel"]}, progress=False)
    compare_cohort(tmp_path / "study", n_repeats=2, n_permutations=10)
    page = write_report(tmp_path / "study")
    html = page.read_text()
    gallery = tmp_path / "study" / "figures" / "gallery"
    flows = sorted(gallery.glob("*-flow.png"))
    assert len(flows) == 4
    assert html.count(": modelled flow'") == 4  # one flow picture per sample shown
    assert "a model, not measured flow" in html
    lo, hi = json.loads((gallery / "flow-colour-scale.json").read_text())
    import pandas as pd
    values = np.concatenate([pd.read_csv(p)["flow"].to_numpy(float) for p in
                             (tmp_path / "study" / "samples").glob("*/branches.csv")])
    values = values[np.isfinite(values) & (values > 0)]
    assert (lo, hi) == pytest.approx(tuple(np.percentile(values, [1, 99])))
