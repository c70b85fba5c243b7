"""Report stage: results.json round trip, ECSV tables, terminal summary and the PDF pages."""

from __future__ import annotations

import copy
import json
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import matplotlib.text
import numpy as np
import pytest
from astropy.table import Table
from report_helpers import N_CONES, make_results

import conecheck.report.html as html_mod
from conecheck.compare import jsonable
from conecheck.errors import InputError
from conecheck.report import (
    build_pages,
    draw_page,
    load_results,
    render_html,
    render_report,
    rerender,
    results_to_json,
    summary_table,
    write_statistic_tables,
)
from conecheck.report.access import iter_stats
from conecheck.report.layout import text_width, wrap
from conecheck.report.pages_values import PER_PAGE as VALUES_PER_PAGE
from conecheck.report.pagespec import TEXT_KINDS
from conecheck.report.style import FOOTER_RULE, HEADER_RULE

STATS = ("number_density", "wp", "cic", "vpf", "annuli")


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    run_dir = tmp_path_factory.mktemp("run")
    return run_dir, make_results(run_dir)


@pytest.fixture(scope="module")
def rendered(run):
    run_dir, results = run
    out = run_dir / "report.pdf"
    return out, render_report(results, run_dir, out)


def _pdf_pages(path: Path) -> int:
    # Page objects in the PDF matplotlib writes ("/Type /Page", not "/Pages").
    return len(re.findall(rb"/Type\s*/Page\b(?!s)", path.read_bytes()))


def _check_figure(fig, expected_axes) -> None:
    """Expected axes present; no text beyond the page; axes and their labels in the content.

    The content area lies between the header rule and the footer rule (report/style.py).
    """
    labels = {ax.get_label() for ax in fig.axes}
    missing = set(expected_axes) - labels
    assert not missing, f"missing axes {missing}"
    fig.canvas.draw()  # axis labels and tick labels get their positions at draw time
    renderer = fig.canvas.get_renderer()
    w, h = fig.bbox.width, fig.bbox.height
    # Tick labels beyond an axis's view limits exist but are not drawn; the drawn ones are
    # inside each axes' tight box, checked below.
    ticks = {id(label) for ax in fig.axes for axis in (ax.xaxis, ax.yaxis)
             for tick in axis.get_major_ticks() + axis.get_minor_ticks()
             for label in (tick.label1, tick.label2)}
    for t in fig.findobj(matplotlib.text.Text):
        if not t.get_visible() or not t.get_text().strip():
            continue
        if id(t) in ticks:
            assert t.get_fontsize() >= 8, f"font below 8 pt: {t.get_text()!r}"
            continue
        bb = t.get_window_extent(renderer)
        assert bb.x0 >= -1 and bb.y0 >= -1 and bb.x1 <= w + 1 and bb.y1 <= h + 1, \
            f"text off the page: {t.get_text()!r} at {bb}"
        assert t.get_fontsize() >= 8, f"font below 8 pt: {t.get_text()!r}"
    dpi = fig.dpi
    top, bottom = h - HEADER_RULE * dpi, FOOTER_RULE * dpi  # display y grows upwards
    for ax in fig.axes:
        bb = ax.get_tightbbox(renderer)
        assert bb.y0 >= bottom - 1 and bb.y1 <= top + 1 and bb.x0 >= -1 and bb.x1 <= w + 1, \
            f"axes {ax.get_label()!r} (with its labels) leaves the content area: {bb}"


def test_render_report_pages(run, rendered):
    run_dir, results = run
    specs = build_pages(results, run_dir)
    kinds = [s.kind for s in specs]
    # 2 samples × 2 cuts → 4 statistics pages; one page each for the rest at this size.
    # n(z): one block per sample and cut, three per page
    expected = {"summary": 1, "provenance": 1, "footprint": 1, "nz": 2,
                "statistics": 4, "values": 4 * -(-len(STATS) // VALUES_PER_PAGE),
                "fibres": 1, "luminosity": 1, "cuts": 1}
    for kind, n in expected.items():
        assert kinds.count(kind) == n, kind
    assert 1 <= kinds.count("findings") <= 3
    assert 1 <= kinds.count("rules") <= 2  # the rules text, with the parameter-shift rule
    assert kinds[0] == "summary"
    assert 1 <= kinds.count("appendix") <= 2 and kinds[-1] == "appendix"  # the configuration
    fp = next(s for s in specs if s.kind == "footprint")
    assert set(fp.axes) >= {"footprint:completeness", "footprint:regions"}
    for s in specs:
        if s.kind == "statistics":
            assert set(s.axes) == {"number_density:histogram", "number_density:z",
                                   *(f"{n}:{k}" for n in STATS[1:] for k in ("offset", "z"))}
    values_axes = {a for s in specs if s.kind == "values" for a in s.axes}
    assert values_axes == {f"{n}:values" for n in STATS}
    out, n = rendered
    assert n == len(specs) == _pdf_pages(out)


def test_every_page_fits(run):
    run_dir, results = run
    specs = build_pages(results, run_dir)
    for i, spec in enumerate(specs, 1):
        fig = draw_page(results, spec, i, len(specs))
        _check_figure(fig, spec.axes)
        fig.clear()


def test_rerender_from_json_reproduces(run, tmp_path):
    run_dir, results = run
    path = tmp_path / "results.json"
    results_to_json(results, path)
    loaded = load_results(path)
    assert loaded == json.loads(json.dumps(jsonable(results)))
    stat = loaded["samples"]["bright"]["cuts"]["z0.10-0.20"]["statistics"]["wp"]
    orig = results["samples"]["bright"]["cuts"]["z0.10-0.20"]["statistics"]["wp"]
    assert stat["chi2"] == orig["chi2"] and stat["z"] == orig["z"]
    assert summary_table(loaded) == summary_table(results)
    # Copy the footprint files so the re-render only sees the run directory.
    other = tmp_path / "copy"
    other.mkdir()
    for f in ("mask.fits", "regions.npz"):
        shutil.copy(run_dir / f, other / f)
    shutil.copy(path, other / "results.json")
    again, n = rerender(other)
    assert again == loaded
    assert n == len(build_pages(results, run_dir)) == _pdf_pages(other / "validation.pdf")
    assert [s.axes for s in build_pages(loaded, other)] == \
        [s.axes for s in build_pages(results, run_dir)]


def test_json_has_null_not_nan(tmp_path):
    path = tmp_path / "r.json"
    results_to_json({"conecheck_version": "x", "overall": "pass", "samples": {},
                     "v": [1.0, float("nan"), float("inf")], "n": np.float64(2.5)}, path)
    text = path.read_text()
    assert "NaN" not in text and "Infinity" not in text
    assert json.loads(text)["v"] == [1.0, None, None]


def test_load_results_names_missing_keys(tmp_path, run):
    _, results = run
    bad = copy.deepcopy(jsonable(results))
    del bad["conecheck_version"]
    del bad["samples"]["faint"]["cuts"]["z0.05-0.12"]["statistics"]["vpf"]["chi2"]
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(bad))
    with pytest.raises(InputError) as e:
        load_results(path)
    text = " ".join(e.value.problems)
    assert "conecheck_version" in text
    assert "faint.cuts.z0.05-0.12.statistics.vpf: missing key(s) chi2" in text
    path.write_text("{not json")
    with pytest.raises(InputError, match="not valid JSON"):
        load_results(path)
    with pytest.raises(InputError, match="not found"):
        load_results(tmp_path / "absent.json")


def test_statistic_tables(run, tmp_path):
    _, results = run
    files = write_statistic_tables(results, tmp_path / "tables")
    assert len(files) == 2 * 2 * len(STATS)
    path = tmp_path / "tables" / "bright__z0.10-0.20__wp.ecsv"
    assert path in files
    t = Table.read(path, format="ascii.ecsv")
    stat = results["samples"]["bright"]["cuts"]["z0.10-0.20"]["statistics"]["wp"]
    head = ["bin", "box", "cone_mean"] + [f"cone_{i:03d}" for i in range(N_CONES)]
    assert t.colnames[:len(head)] == head
    for col in ("sigma_box", "sigma_cone", "sigma_total", "z", "fractional_offset",
                "detectable_offset"):
        assert np.allclose(t[col], stat[col])
    assert np.allclose(t["cone_002"], stat["cones"][2])
    assert t.meta["verdict"] == stat["verdict"] and t.meta["dof"] == stat["dof"]
    assert t.meta["chi2"] == pytest.approx(stat["chi2"])


def test_summary_table_text(run):
    _, results = run
    text = summary_table(results)
    lines = text.splitlines()
    assert lines[0].split() == ["sample", "cut", "statistic", "verdict", "max|z|", "chi2/dof",
                                "p"]
    assert len(lines) == 2 + 20 + 2
    assert f"overall: {results['overall'].upper()}" in text
    wp = results["samples"]["bright"]["cuts"]["z0.10-0.20"]["statistics"]["wp"]
    assert any(ln.startswith("bright") and " wp " in ln and wp["verdict"].upper() in ln
               for ln in lines)


def test_missing_sections_are_stated(tmp_path):
    results = make_results(tmp_path)
    del results["provenance"]
    results["footprint"] = {"mask_path": "nowhere.fits", "regions_path": None}
    del results["samples"]["faint"]["fibres"]
    del results["samples"]["faint"]["cuts"]["z0.05-0.12"]["nz"]
    specs = build_pages(results, tmp_path)
    assert [s.axes for s in specs if s.kind == "footprint"] == [()]
    texts = []
    for i, spec in enumerate(specs, 1):
        if spec.kind not in ("footprint", "provenance", "fibres", "nz"):
            continue  # the pages that lost their data; every page is drawn by the next test
        fig = draw_page(results, spec, i, len(specs))
        _check_figure(fig, spec.axes)
        texts += [t.get_text() for t in fig.findobj(matplotlib.text.Text)]
        fig.clear()
    joined = "\n".join(texts)
    assert "footprint mask not found" in joined
    assert "no provenance section" in joined
    assert "No fibre-collision emulation recorded" in joined
    assert "no n(z) recorded" in joined


def test_long_content_paginates(tmp_path):
    results = make_results(tmp_path, config_lines=400)
    # Many samples: the verdict table must continue on further pages.
    base = results["samples"]["bright"]
    for i in range(12):
        results["samples"][f"extra{i:02d}"] = copy.deepcopy(base)
    specs = build_pages(results, tmp_path)
    kinds = [s.kind for s in specs]
    assert kinds.count("summary") >= 2
    # what a referee needs stays on one page; a long configuration flows over the
    # appendix's two columns (400 lines at about 70 per column)
    assert kinds.count("provenance") == 1
    assert kinds.count("appendix") >= 3
    seen: dict[str, int] = {}
    for i, spec in enumerate(specs, 1):
        seen[spec.kind] = seen.get(spec.kind, 0) + 1
        # First two and the last page of each long kind (drawing every page is slow).
        last = i == len(specs) or specs[i].kind != spec.kind
        long_kind = spec.kind in ("summary", "provenance", "findings", "appendix")
        if long_kind and (seen[spec.kind] <= 2 or last):
            fig = draw_page(results, spec, i, len(specs))
            _check_figure(fig, spec.axes)
            fig.clear()


def test_wrap_respects_width():
    text = "a fairly long sentence with words " * 8 + "/a/very/long/path/" + "x" * 150
    for size, mono in ((9, False), (8, True)):
        lines = wrap(text, 2.5, size, mono=mono)
        assert len(lines) > 5
        assert all(text_width(ln, size, mono) <= 2.5 for ln in lines)
        assert "".join(ln.replace(" ", "") for ln in lines) == text.replace(" ", "")


def test_pdf_pages_as_images(rendered, tmp_path):
    """Rasterise the PDF when poppler's pdftoppm is available (else covered above)."""
    exe = shutil.which("pdftoppm")
    if exe is None:
        pytest.skip("pdftoppm not installed; pages were checked as matplotlib figures")
    pdf, n = rendered
    subprocess.run([exe, "-r", "20", "-png", str(pdf), str(tmp_path / "p")], check=True)
    pngs = sorted(tmp_path.glob("p-*.png"))
    assert len(pngs) == n
    import matplotlib.image as mpimg

    for p in pngs:
        img = mpimg.imread(p)
        assert img.std() > 0.01  # not blank


# --------------------------------------------------------------------------- HTML page
class _Page(HTMLParser):
    """Collects what the HTML checks need (Python's own parser: a reference outside us)."""

    def __init__(self) -> None:
        super().__init__()
        self.ids: set[str] = set()
        self.links: list[str] = []
        self.external: list[str] = []
        self.rows: list[dict[str, str]] = []
        self.reasons: list[str] = []
        self.svgs = 0
        self.selects: dict[str, list[str]] = {}
        self._select: str | None = None
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.add(a["id"])
        for key in ("href", "src"):
            v = a.get(key)
            if v is None:
                continue
            if v.startswith("#"):
                self.links.append(v[1:])
            elif not v.startswith("data:"):
                self.external.append(v)
        if tag in ("link", "iframe", "object", "embed"):
            self.external.append(tag)
        if tag == "tr" and "row" in (a.get("class") or "").split():
            self.rows.append(a)
        if tag == "tr" and a.get("class") == "reasons":
            self.reasons.append(a.get("id", ""))
        if tag == "svg":
            self.svgs += 1
        if tag == "select":
            self._select = a.get("name")
            self.selects[self._select] = []
        if tag == "option" and self._select and a.get("value"):
            self.selects[self._select].append(a["value"])

    def handle_endtag(self, tag):
        if tag == "select":
            self._select = None

    def handle_data(self, data):
        self.text.append(data)


def test_html_report_is_self_contained_and_complete(run, tmp_path):
    run_dir, results = run
    out = tmp_path / "validation.html"
    n_fig = render_html(results, run_dir, out)
    page = _Page()
    page.feed(out.read_text(encoding="utf-8"))
    page.close()
    stats = list(iter_stats(results))
    # one row per sample × cut × statistic, each with its reasons row
    assert len(page.rows) == len(stats) == len(page.reasons)
    assert [(r["data-sample"], r["data-cut"]) for r in page.rows] == [(s, c) for s, c, *_ in stats]
    assert all(r["data-reasons"] in page.ids for r in page.rows)
    # every figure of the PDF but the text pages, as inline vector graphics
    figure_pages = [s for s in build_pages(results, run_dir) if s.kind not in TEXT_KINDS]
    assert n_fig == len(figure_pages) == page.svgs > 0
    # every link lands on this page; nothing is fetched from anywhere
    assert page.links and set(page.links) <= page.ids
    assert not page.external, page.external
    # the filters offer exactly the values of the table
    assert set(page.selects) == {"sample", "cut", "statistic", "verdict"}
    assert set(page.selects["sample"]) == {s for s, *_ in stats}
    assert set(page.selects["verdict"]) == {c.verdict for *_, c in stats}
    text = " ".join(page.text)
    first_reason = stats[0][3].reasons[0]
    assert first_reason in text
    assert "Provenance" in text and "seed" in text


def test_pdf_pass_hands_the_html_every_figure_drawn_once(run, tmp_path, monkeypatch):
    """With both reports, each figure page is drawn once: the PDF pass keeps its SVG and the
    HTML page takes it instead of drawing again; the HTML is the one drawn on its own up to
    matplotlib's random SVG ids and the metadata date."""
    run_dir, results = run
    pages = build_pages(results, run_dir)
    alone = tmp_path / "alone.html"
    render_html(results, run_dir, alone, pages)
    svgs: dict[int, str] = {}
    render_report(results, run_dir, tmp_path / "v.pdf", pages, svgs)
    assert sorted(svgs) == [i for i, s in enumerate(pages, start=1) if s.kind not in TEXT_KINDS]

    def no_drawing(*args, **kwargs):
        raise AssertionError("the HTML drew a page the PDF pass had already drawn")

    monkeypatch.setattr(html_mod, "draw_page", no_drawing)
    shared = tmp_path / "shared.html"
    assert render_html(results, run_dir, shared, pages, svgs) == len(svgs)

    def canonical(text: str) -> str:
        text = re.sub(r"<dc:date>[^<]*</dc:date>", "", text)
        names: dict[str, str] = {}
        for name in re.findall(r'id="([^"]+)"', text):
            names.setdefault(name, f"id{len(names)}")
        return re.sub(r'(id="|#)([A-Za-z0-9_-]+)',
                      lambda m: m.group(1) + names.get(m.group(2), m.group(2)), text)

    assert canonical(shared.read_text(encoding="utf-8")) == canonical(
        alone.read_text(encoding="utf-8"))


def test_single_cut_samples_get_a_line_not_a_block(run):
    run_dir, results = run
    results = copy.deepcopy(results)
    bright = results["samples"]["bright"]["cuts"]
    for cname in list(bright)[1:]:
        del bright[cname]
    cut_specs = [s for s in build_pages(results, run_dir) if s.kind == "cuts"]
    assert len(cut_specs) == 1 and cut_specs[0].axes == ("cuts:faint",)
    fig = draw_page(results, cut_specs[0], 1, 1)
    texts = [t.get_text() for t in fig.findobj(matplotlib.text.Text)]
    assert any("One redshift cut only, nothing to compare: bright." in t for t in texts)
    for sample in results["samples"].values():  # no sample with two cuts: no page
        for cname in list(sample["cuts"])[1:]:
            del sample["cuts"][cname]
    assert not [s for s in build_pages(results, run_dir) if s.kind == "cuts"]


def test_fibre_fractions_shared_by_every_sample_are_drawn_once(run):
    run_dir, results = run
    fibre = [s for s in build_pages(results, run_dir) if s.kind == "fibres"]
    assert [a for s in fibre for a in s.axes] == ["fibres:bright", "fibres:faint"]
    results = copy.deepcopy(results)
    results["samples"]["faint"]["fibres"]["collided_fraction"] = \
        results["samples"]["bright"]["fibres"]["collided_fraction"]
    results["samples"]["faint"]["fibres"]["recovered_fraction"] = \
        results["samples"]["bright"]["fibres"]["recovered_fraction"]
    fibre = [s for s in build_pages(results, run_dir) if s.kind == "fibres"]
    assert [a for s in fibre for a in s.axes] == ["fibres:bright"]
    fig = draw_page(results, fibre[0], 1, 1)
    _check_figure(fig, fibre[0].axes)
    assert any("all samples (bright, faint)" in t.get_text()
               for t in fig.findobj(matplotlib.text.Text))


def test_statistics_with_many_bins_get_a_whole_row_on_attribution_pages():
    from conecheck.report.pages_attribution import WIDE_BINS, _pack

    wide = WIDE_BINS + 1
    pages = _pack(["number_density", "wp", "cic", "vpf"],
                  {"number_density": 1, "wp": wide, "cic": 6, "vpf": 3})
    assert pages == [[("number_density", 0, 1), ("wp", 2, 2), ("cic", 1, 1), ("vpf", 4, 1)]]
    # three wide statistics: two rows on the first page (the third row keeps the key)
    pages = _pack(["a", "b", "c"], {"a": wide, "b": wide + 6, "c": wide})
    assert pages == [[("a", 0, 2), ("b", 2, 2)], [("c", 0, 2)]]


def test_nz_departures_are_named_with_their_significance():
    """A bin whose mean lies 5 % low with a 1 % error of the mean is named; noise is not.

    The cones are drawn Gaussian about the expectation (σ = 2 % per cone, 16 cones, so the
    error of the mean is 0.5 %): the untouched bins stay far below 3 errors and 1 %.
    """
    from conecheck.report.pages_nz import departures

    rng = np.random.default_rng(5)
    edges = np.linspace(0.02, 0.07, 6)
    expected = np.full(5, 1000.0)
    truth = expected.copy()
    truth[-1] *= 0.95
    cones = truth * (1 + 0.02 * rng.standard_normal((16, 5)))
    notes = departures(edges, cones, expected)
    assert len(notes) == 1 and notes[0].startswith("z 0.06–0.07: mean -")
    low = float(re.search(r"mean (-[\d.]+) %", notes[0]).group(1))
    assert abs(low + 5.0) < 1.5  # 3 errors of the mean (0.5 %)
    assert "far edge" in notes[0]
    assert departures(edges, cones[:, :4].repeat(2, axis=1)[:, :5], expected) == []


def test_footprint_page_and_mask_plot_both_put_east_on_the_left(run):
    """Larger right ascension lies further left in both, as on the sky seen from inside."""
    from conecheck.footprint import Footprint
    from conecheck.footprint.plot import plot_footprint

    run_dir, results = run
    spec = next(s for s in build_pages(results, run_dir) if s.kind == "footprint")
    fig = draw_page(results, spec, 1, 1)
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    ax = next(a for a in fig.axes if a.get_label() == "footprint:completeness")
    ra_labels = [(float(t.get_text()[:-1]), t.get_window_extent(renderer).x0)
                 for t in ax.texts if re.fullmatch(r"\d+°", t.get_text())]
    assert len(ra_labels) >= 3  # the test footprint spans RA 150–230 (no wrap)
    ras, xs = zip(*sorted(ra_labels), strict=True)
    assert all(np.diff(xs) < 0), ra_labels
    plot = plot_footprint(Footprint.from_fits(run_dir / "mask.fits"))
    pax = plot.axes[0]
    ticks = sorted(pax.get_xticks())
    fmt = pax.xaxis.get_major_formatter()
    tick_ras = [float(fmt(t, 0)[:-1]) for t in ticks if pax.get_xlim()[0] <= t
                <= pax.get_xlim()[1]]
    assert len(tick_ras) >= 2 and all(np.diff(tick_ras) < 0), tick_ras


def test_completeness_panel_includes_the_vetoes(run, tmp_path):
    """The panel shows mask × vetoes, a veto of another N_side resampled as the run does."""
    import healpy as hp

    from conecheck.report.pages_footprint import apply_vetoes, load_mask

    run_dir, results = run
    mask = load_mask(run_dir / "mask.fits")
    nside = hp.npix2nside(mask.size)
    ra, dec = hp.pix2ang(nside // 2, np.arange(hp.nside2npix(nside // 2)), lonlat=True)
    veto = np.where(dec > 20, 0.0, 1.0)  # cut away the north of the footprint
    hp.write_map(str(tmp_path / "veto.fits"), veto, dtype=np.float64)
    got = apply_vetoes(mask, [tmp_path / "veto.fits"])
    np.testing.assert_array_equal(got, mask * hp.ud_grade(veto, nside))  # healpy reference
    assert got.sum() < mask.sum()
    results = copy.deepcopy(results)
    results["footprint"]["veto_paths"] = [str(tmp_path / "veto.fits")]
    spec = next(s for s in build_pages(results, run_dir) if s.kind == "footprint")
    texts = [t.get_text() for t in draw_page(results, spec, 1, 1).findobj(matplotlib.text.Text)]
    assert not any("veto" in t for t in texts)  # applied, no problem reported
    results["footprint"]["veto_paths"] = [str(tmp_path / "gone.fits")]
    spec = next(s for s in build_pages(results, run_dir) if s.kind == "footprint")
    texts = [t.get_text() for t in draw_page(results, spec, 1, 1).findobj(matplotlib.text.Text)]
    assert any("veto map(s) not found" in t for t in texts)
