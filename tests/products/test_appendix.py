"""Tests of tsunamifocus.report: the planning-study appendix (HTML + PDF).

Checks are made against things outside the report module: the stdlib HTML parser, the PDF
file structure (ISO 32000-1: page objects are dictionaries with ``/Type /Page``), the cautions
file of the repository, the DejaVu Sans font's character map (fontTools), the PDF's text read
back by poppler's ``pdftotext`` when installed or else by pypdf, and the magnitude formula of
tsunamifocus.source.
"""

from __future__ import annotations

import base64
import html.parser
import pathlib
import re
import shutil
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from tsunamifocus.cautions import caution_text
from tsunamifocus.products import appendix as report
from tsunamifocus.products import figures
from tsunamifocus.errors import DataFileError, InputError

sys.path.insert(0, str(pathlib.Path(__file__).parent))
from test_figures import synthetic_case  # noqa: E402

REPO = pathlib.Path(__file__).resolve().parents[2]
HAVE_PDFTOTEXT = shutil.which("pdftotext") is not None

#: HTML void elements (WHATWG HTML Living Standard, section 13.1.2): no end tag.
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}


class _Collector(html.parser.HTMLParser):
    """Collects text, image sources, external references and checks tag nesting."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.imgs: list[str] = []
        self.external: list[str] = []
        self.text: list[str] = []
        self.h2: list[str] = []
        self._in_h2 = False
        self.order: list[str] = []  # ids of sections in document order

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag not in VOID:
            self.stack.append(tag)
        if tag == "img":
            self.imgs.append(a.get("src", ""))
        for key in ("src", "href"):
            v = a.get(key)
            if v and not (v.startswith("data:") or v.startswith("#")):
                self.external.append(v)
        if tag == "link":
            self.external.append(str(a))
        if tag == "h2":
            self._in_h2 = True
            self.h2.append("")
        if "id" in a:
            self.order.append(a["id"])

    def handle_endtag(self, tag):
        if tag in VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"unbalanced </{tag}> (open: {self.stack[-3:]})")
        else:
            self.stack.pop()
        if tag == "h2":
            self._in_h2 = False

    def handle_data(self, data):
        self.text.append(data)
        if self._in_h2:
            self.h2[-1] += data


def _norm(s: str) -> str:
    return " ".join(s.split())


def caution_paragraphs() -> list[str]:
    """Paragraphs and bullet items of the repository's CAUTIONS.md, read independently."""
    txt = (REPO / "CAUTIONS.md").read_text(encoding="utf-8")
    body = [ln for ln in txt.splitlines() if not ln.startswith("# ")]
    parts, cur = [], []
    for ln in body + [""]:
        s = ln.strip()
        if s.startswith("- ") or not s:
            if cur:
                parts.append(" ".join(cur))
            cur = [s[2:]] if s.startswith("- ") else []
        else:
            cur.append(s)
    return [_norm(p) for p in parts if p]


@pytest.fixture(scope="module")
def figs(tmp_path_factory):
    d = tmp_path_factory.mktemp("figs")
    c = synthetic_case(False, n_seg=14)
    out = {
        "uplift": figures.plot_uplift(c["eta"], out_path=d / "uplift.png", depth=c["depth"]),
        "lensing_map": figures.plot_lensing_map(
            c["depth"], c["lensing"], c["travel"], c["segments"], 5, out_path=d / "lensing.png"
        ),
        "ranking": figures.plot_ranking(c["segments"], 8, out_path=d / "ranking.png"),
    }
    return out, c["segments"]


def base_context(figs_and_seg) -> dict:
    figs, seg = figs_and_seg
    seg = seg.copy()
    seg["first_arrival_s"] = 1200.0 + 30 * np.arange(len(seg))
    seg["n_rays"] = 30 + np.arange(len(seg))
    return {
        "scenario": {
            "name": "Invented test bay",
            "description": "Synthetic inputs for the appendix tests.",
            "grid": {"crs": "EPSG:32733", "shape": "121 x 161", "spacing_m": 2500.0},
            "sources": [{"name": "A", "Mw": 8.4, "strike_deg": 90.0, "dip_deg": 12.0, "M0_Nm": 4.5e21}],
            "settings": {"n_rays": 5000, "stop_depth_m": 20.0},
        },
        "ranking": seg,
        "date": "2026-12-01T12:00:00Z",
        "run_id": "test-1",
        "data_sources": ["Invented bathymetry (random field, seed 3)"],
        "validation": [
            {"test": "Green's law on a slope", "error": "0.3 %", "tolerance": "2 %", "status": "pass"}
        ],
        "health": {
            "termination_fractions": {"coast": 0.8, "left_grid": 0.2},
            "energy_bookkeeping_error": {"value": 1e-8, "limit": 1e-3, "ok": True},
            "nan_hole_fraction": 0.0,
        },
        "figures": dict(figs),
        "top_k": 6,
    }


def pdf_text(path: pathlib.Path, first: int | None = None, last: int | None = None) -> str:
    """Text of pages ``first``..``last`` (1-based), read by poppler's pdftotext where installed, else
    by pypdf (a test dependency): two PDF readers independent of the writer."""
    if HAVE_PDFTOTEXT:
        cmd = ["pdftotext", "-layout"]
        if first:
            cmd += ["-f", str(first)]
        if last:
            cmd += ["-l", str(last)]
        return subprocess.run(cmd + [str(path), "-"], check=True, capture_output=True, text=True).stdout
    from pypdf import PdfReader

    pages = PdfReader(str(path)).pages
    lo, hi = (first or 1) - 1, last or len(pages)
    return "\n".join(pages[i].extract_text() or "" for i in range(lo, hi))


# --------------------------------------------------------------------------------------


def test_html_parses_embeds_figures_and_cautions_first(figs, tmp_path):
    ctx = base_context(figs)
    out = report.build_appendix(ctx, tmp_path / "appendix.html")
    assert out["pdf"] is None
    doc = (tmp_path / "appendix.html").read_text(encoding="utf-8")
    p = _Collector()
    p.feed(doc)
    p.close()
    assert p.errors == [] and p.stack == []
    assert p.external == []  # self-contained: nothing fetched from outside
    # every figure embedded, byte-identical to its PNG file
    assert len(p.imgs) == len(ctx["figures"])
    embedded = [base64.b64decode(s.split(",", 1)[1]) for s in p.imgs]
    assert all(s.startswith("data:image/png;base64,") for s in p.imgs)
    assert sorted(embedded) == sorted(pathlib.Path(f).read_bytes() for f in ctx["figures"].values())
    text = _norm(" ".join(p.text))
    for para in caution_paragraphs():
        assert para in text
    # the cautions box comes before every numbered section
    assert p.order[0] == "cautions"
    assert p.h2[0] == "Cautions" and p.h2[1].startswith("1. Scenario")
    assert "Ranked coastline segments" in " ".join(p.h2)
    assert "Numerical health checks" in " ".join(p.h2)


def test_ranked_table_order_and_intervals(figs, tmp_path):
    ctx = base_context(figs)
    seg = ctx["ranking"]
    cols, rows, shown = report._ranking_table(seg, 6, [])
    assert shown == 6 and cols[0] == "Rank"
    # rank 1 is the largest lensing factor; the interval is printed beside it
    top = seg.sort_values("lensing_factor", ascending=False).iloc[0]
    assert rows[0][1] == top["segment_id"]
    j = cols.index("Lensing factor (5–95 %)")
    assert rows[0][j].startswith(f"{top['lensing_factor']:.3g}")
    assert f"{top['lensing_lo']:.3g}" in rows[0][j]
    # first arrival printed in minutes (s / 60)
    k = cols.index("First arrival (min)")
    assert float(rows[0][k]) == pytest.approx(top["first_arrival_s"] / 60.0, rel=1e-3)


def test_pdf_pages_metadata_and_caution(figs, tmp_path):
    ctx = base_context(figs)
    out = report.build_appendix(ctx, tmp_path / "a.html", tmp_path / "a.pdf")
    data = (tmp_path / "a.pdf").read_bytes()
    assert data.startswith(b"%PDF-")
    # page objects (ISO 32000-1, 7.7.3.3): /Type /Page, not /Pages
    n_pages = len(re.findall(rb"/Type\s*/Page\b", data))
    assert n_pages == out["pdf_pages"] >= 2
    # the cautions travel in the document information dictionary too
    m = re.search(rb"/Subject \((.*?)\)\s*/", data, re.S)
    assert m and b"SCREENING ESTIMATES ONLY" in m.group(1)
    assert b"/Title" in data and b"/Creator" in data
    assert not list(tmp_path.glob(".*.part"))


def test_pdf_text_caution_on_page_one_and_page_numbers(figs, tmp_path):
    ctx = base_context(figs)
    out = report.build_appendix(ctx, tmp_path / "a.html", tmp_path / "a.pdf")
    n = out["pdf_pages"]
    first = _norm(pdf_text(tmp_path / "a.pdf", 1, 1))
    for para in caution_paragraphs():
        assert para in first
    full = pdf_text(tmp_path / "a.pdf")
    for i in range(1, n + 1):
        assert f"Page {i} of {n}" in full
    # equations printed as Unicode text (long-wave speed, Hanks & Kanamori)
    assert "√(g h" in full and "log₁₀ M₀" in full
    assert "Ranked coastline segments" in full


def _optional(key: str) -> dict:
    return {
        "ensemble": {
            "text": "Twelve members with 3 % depth errors.",
            "metrics": {"members": 12, "failed": 0},
            "table": pd.DataFrame({"segment_id": ["S0001"], "p_top_k": [0.75]}),
        },
        "comparison": {"text": "Two scenarios.", "metrics": {"spearman": 0.81, "kendall": 0.64}},
        "wave_check": {"text": "Linear shallow-water solver on the same grid.", "metrics": {"spearman": 0.7}},
    }[key]


@pytest.fixture(scope="module")
def built_without_optional(figs, tmp_path_factory):
    d = tmp_path_factory.mktemp("without")
    out = report.build_appendix(base_context(figs), d / "without.html", d / "without.pdf")
    return (
        out,
        (d / "without.html").read_text(encoding="utf-8"),
        pdf_text(d / "without.pdf"),
    )


@pytest.mark.parametrize("key", ["ensemble", "comparison", "wave_check"])
def test_optional_sections_only_when_given(figs, built_without_optional, tmp_path, key):
    title = report._OPTIONAL_TITLES[key]
    out0, html0, pdf0 = built_without_optional
    assert not any(title in s for s in out0["sections"])
    assert title not in html0 and title not in pdf0
    ctx = base_context(figs)
    ctx[key] = _optional(key)
    out1 = report.build_appendix(ctx, tmp_path / "with.html", tmp_path / "with.pdf")
    assert any(title in s for s in out1["sections"])
    doc = (tmp_path / "with.html").read_text(encoding="utf-8")
    assert title in doc and _optional(key)["text"] in doc
    assert title in pdf_text(tmp_path / "with.pdf")


def test_optional_section_with_figure(figs, tmp_path):
    ctx = base_context(figs)
    ctx["wave_check"] = {"text": "Agreement.", "figures": [ctx["figures"]["ranking"]]}
    report.build_appendix(ctx, tmp_path / "x.html")
    p = _Collector()
    p.feed((tmp_path / "x.html").read_text(encoding="utf-8"))
    assert len(p.imgs) == len(ctx["figures"]) + 1
    # a section's figures continue the document's figure numbers (common practice, no source)
    _, blocks = report.document_blocks(ctx)
    caps = [b["caption"] for b in blocks if b["kind"] == "figure"]
    assert [c.split(".")[0] for c in caps] == [f"Figure {i}" for i in range(1, len(caps) + 1)]


def test_context_errors(figs, tmp_path):
    ctx = base_context(figs)
    with pytest.raises(InputError, match="did you mean 'figures'"):
        report.build_appendix({**ctx, "figure": {}}, tmp_path / "x.html")
    bad = dict(ctx)
    del bad["ranking"]
    with pytest.raises(InputError, match="'ranking' is missing"):
        report.build_appendix(bad, tmp_path / "x.html")
    with pytest.raises(DataFileError, match="does not exist"):
        report.build_appendix({**ctx, "figures": {"ray_field": tmp_path / "nope.png"}}, tmp_path / "x.html")
    notpng = tmp_path / "fake.png"
    notpng.write_text("not an image")
    with pytest.raises(DataFileError, match="not a PNG"):
        report.build_appendix({**ctx, "figures": {"ray_field": notpng}}, tmp_path / "x.html")
    with pytest.raises(InputError, match="ISO 8601"):
        report.build_appendix({**ctx, "date": "yesterday"}, tmp_path / "x.html")
    with pytest.raises(InputError, match="unknown key"):
        report.build_appendix({**ctx, "ensemble": {"txt": "typo"}}, tmp_path / "x.html")
    with pytest.raises(InputError, match="more_tables.*expected a list of dicts"):
        report.build_appendix({**ctx, "ensemble": {"more_tables": "a table"}}, tmp_path / "x.html")
    assert not (tmp_path / "x.html").exists()  # nothing written when the context is bad


def test_section_more_tables_follow_the_first(figs, tmp_path):
    ctx = base_context(figs)
    ctx["comparison"] = {"table": [{"a": 1}], "table_caption": "First table",
                         "more_tables": [{"table": [{"b": 2}], "caption": "Second table"}]}
    _, blocks = report.document_blocks(ctx)
    caps = [b["caption"] for b in blocks if b["kind"] == "table" and b.get("caption")]
    assert caps.index("First table") + 1 == caps.index("Second table")


def test_every_character_has_a_glyph_in_the_pdf_font(figs):
    # fpdf2 draws with DejaVu Sans; a character missing from its cmap would print as a box.
    from fontTools.ttLib import TTFont

    fonts = report._font_paths()
    assert fonts is not None
    ctx = base_context(figs)
    for key in ("ensemble", "comparison", "wave_check"):
        ctx[key] = _optional(key)
    meta, blocks = report.document_blocks(ctx)
    chars = set("".join(report._iter_texts(blocks)) + "".join(meta.values()) + report.CAUTION_SHORT + "•")
    for style, path in fonts.items():
        cmap = TTFont(str(path)).getBestCmap()
        missing = sorted(c for c in chars if ord(c) not in cmap and not c.isspace())
        assert missing == [], f"style {style!r}: {missing}"


def test_same_inputs_same_pdf_bytes(figs, tmp_path):
    # a fixed context date makes the PDF reproducible (manifest re-runs compare hashes)
    ctx = base_context(figs)
    report.build_appendix(ctx, tmp_path / "1.html", tmp_path / "1.pdf")
    report.build_appendix(ctx, tmp_path / "2.html", tmp_path / "2.pdf")
    assert (tmp_path / "1.pdf").read_bytes() == (tmp_path / "2.pdf").read_bytes()
    assert (tmp_path / "1.html").read_bytes() == (tmp_path / "2.html").read_bytes()


def test_magnitude_equation_agrees_with_source_module():
    # Hanks & Kanamori (1979) in SI units: Mw = 2/3 (log10 M0 - 9.1); M0 = 1e22 N m gives
    # Mw = 8.6 (arithmetic). The appendix equation and the code must use the same constant.
    from tsunamifocus.source.faults import magnitude_from_moment

    eq = next(e for s in report.DEFAULT_METHOD for e in s.get("equations", []) if "Mw" in e)
    const = float(re.search(r"log₁₀ M₀ − ([0-9.]+)\)", eq).group(1))
    assert (2 / 3) * (22 - const) == pytest.approx(8.6)
    assert float(magnitude_from_moment(1e22)) == pytest.approx((2 / 3) * (22 - const))


def test_formatting_helpers():
    assert report._fmt(8.9e21) == "8.9×10²¹"
    assert report._fmt(float("nan")) == "–"
    assert report._fmt(True) == "yes"
    assert report._fmt(86400.0) == "86 400"
    assert report._fmt(-0.25) == "−0.25"
    assert report._pretty_key("spacing_m") == "Spacing (m)"
    assert report._pretty_key("n_rays") == "Number of rays"
    assert report._pretty_key("M0_Nm") == "M0 (N m)"
    assert report._pretty_key("strike_deg") == "Strike (°)"


def test_cautions_text_matches_repository_file():
    txt = _norm(caution_text())
    for para in caution_paragraphs():
        assert para in txt


def test_nullable_columns_render(figs, tmp_path):
    # ranks with gaps and unknown reliability arrive as pandas nullable dtypes / None
    ctx = base_context(figs)
    seg = ctx["ranking"].copy()
    seg["rank_lensing"] = pd.array([pd.NA] + list(range(1, len(seg))), dtype="Int64")
    seg["reliable"] = pd.array([None] + [True] * (len(seg) - 1), dtype="boolean")
    seg.loc[seg.index[1], "first_arrival_s"] = np.nan
    ctx["ranking"] = seg
    report.build_appendix(ctx, tmp_path / "n.html", tmp_path / "n.pdf")
    cols, rows, _ = report._ranking_table(seg, len(seg), [])
    assert rows[-1][0] == "–"  # the segment without a rank goes last
    assert rows[0][cols.index("First arrival (min)")] == "–"


def test_figures_in_reading_order(figs):
    # whatever order the caller's dict has, the source comes first and the ranking chart last
    ctx = base_context(figs)
    f = ctx["figures"]
    ctx["figures"] = {"ranking": f["ranking"], "lensing_map": f["lensing_map"], "uplift": f["uplift"]}
    _, blocks = report.document_blocks(ctx)
    paths = [b["path"] for b in blocks if b["kind"] == "figure"]
    assert paths == [pathlib.Path(f["uplift"]), pathlib.Path(f["lensing_map"]), pathlib.Path(f["ranking"])]


def test_empty_names_column_is_left_out(figs):
    ctx = base_context(figs)
    seg = ctx["ranking"].copy()
    seg["name"] = [None, np.nan] + [""] * (len(seg) - 2)
    cols, _, _ = report._ranking_table(seg, 5, [])
    assert "Name" not in cols
    seg.loc[seg.index[0], "name"] = "Harbour mouth"
    cols, _, _ = report._ranking_table(seg, len(seg), [])
    assert "Name" in cols


def test_intervals_never_print_an_empty_bound(figs):
    # an unbounded bootstrap interval (reference energy 0 in some replicates) reads "0 to ∞", never
    # "21.3 (0––)"; an unknown bound drops the interval (common practice, no source)
    ctx = base_context(figs)
    seg = ctx["ranking"].copy()
    seg["lensing_factor"] = [21.3] + [1.0] * (len(seg) - 1)
    seg["lensing_lo"] = [0.0] + [0.5] * (len(seg) - 1)
    seg["lensing_hi"] = [np.inf] + [np.nan] + [2.0] * (len(seg) - 2)
    seg["rank_lensing"] = pd.array(list(range(1, len(seg) + 1)), dtype="Int64")
    cols, rows, _ = report._ranking_table(seg, 3, [])
    j = cols.index("Lensing factor (5–95 %)")
    assert rows[0][j] == "21.3 (0 to ∞)"
    # three significant digits, trailing zeros kept, as in the ranking chart (1.00, not 1)
    assert rows[1][j] == "1.00"
    assert rows[2][j] == "1.00 (0.500–2.00)"
    assert not any("––" in c or "(–" in c or "–)" in c for r in rows for c in r)


def test_ranking_text_counts_what_the_table_shows(figs):
    ctx = base_context(figs)
    seg = ctx["ranking"].copy()
    n = len(seg)
    seg["reliable"] = [True] * 4 + [False] * (n - 4)
    seg["rank_lensing"] = pd.array([1, 2, 3, 4] + [pd.NA] * (n - 4), dtype="Int64")
    ctx["ranking"], ctx["top_k"] = seg, 6
    _, blocks = report.document_blocks(ctx)
    i = next(k for k, b in enumerate(blocks) if b["kind"] == "h2" and "Ranked" in b["text"])
    text = blocks[i + 1]["text"]
    assert text.startswith(f"The 4 highest-ranked of {n} coastline segments") and "followed by 2 segments" in text
    seg["reliable"] = False
    seg["rank_lensing"] = pd.array([pd.NA] * n, dtype="Int64")
    _, blocks = report.document_blocks(ctx)
    text = blocks[i + 1]["text"]
    assert text.startswith(f"No segment of the {n} coastline segments is reliable") and "6 highest" in text


@pytest.mark.slow
def test_headings_start_on_the_page_of_what_follows(figs, tmp_path):
    # keep-with-next (common practice of typesetting, no source): a heading never ends a page. The
    # description's length shifts every later block down the pages; tables with wrapping cells follow
    # headings, the case where a rough height estimate used to leave the heading behind.
    ctx = base_context(figs)
    long_note = "nearest coastline segment far away; no sea cell reached by rays nearby (limit 33 km) " * 2
    pts = pd.DataFrame({"name": [f"Harbour {i}" for i in range(14)], "lon": np.linspace(150, 151, 14),
                        "lat": -39.0, "first_arrival_min": 40.0, "note": long_note})
    ctx["points"] = pts
    stranded = []
    for k in range(0, 40, 5):
        ctx["scenario"] = dict(ctx["scenario"], description="Synthetic inputs. " + "More words here. " * (12 * k))
        res = report.build_appendix(ctx, tmp_path / f"k{k}.html", tmp_path / f"k{k}.pdf")
        pages = res["pdf_block_pages"]
        for (kind, text, pg), nxt in zip(pages, pages[1:]):
            if kind in ("h2", "h3") and nxt[2] != pg:
                stranded.append((k, text, pg, nxt[0]))
    assert not stranded, stranded


def test_pdf_replaces_glyphs_its_font_lacks_and_says_so(figs, tmp_path):
    """DejaVu Sans has no CJK ideographs and no emoji (its cmap, read with fontTools): such characters
    become '?' in the PDF with a warning naming them; the HTML keeps them."""
    import warnings

    from tsunamifocus.errors import TsunamiFocusWarning

    ctx = base_context(figs)
    ctx["scenario"]["name"] = "Bay \u6d77\u6e7e \U0001f30a"
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        out = report.build_appendix(ctx, tmp_path / "a.html", tmp_path / "a.pdf")
    msgs = [str(x.message) for x in w if issubclass(x.category, TsunamiFocusWarning)]
    assert any("3 character(s) the PDF font (DejaVu Sans) cannot draw were replaced by '?'" in m
               and "U+6D77" in m and "U+1F30A" in m for m in msgs), msgs
    assert out["pdf"].read_bytes().startswith(b"%PDF")
    assert "Bay ?? ?" in pdf_text(out["pdf"], 1, 1)
    assert "\u6d77\u6e7e" in (tmp_path / "a.html").read_text(encoding="utf-8")


def _section_blocks(ctx: dict) -> list[dict]:
    """The blocks of the "Ranked coastline segments" section."""
    _, blocks = report.document_blocks(ctx)
    i = next(k for k, b in enumerate(blocks) if b["kind"] == "h2" and "Ranked" in b["text"])
    j = next(k for k in range(i + 1, len(blocks)) if blocks[k]["kind"] == "h2")
    return blocks[i + 1:j]


def test_amplitude_ranking_table_takes_its_own_segments_and_place(figs):
    # the amplitude ranking ranks the segments the real ocean's tubes cover (amp_reliable), the lensing
    # ranking those both oceans' cover (reliable): each table ranks by its own flag and rank column
    ctx = base_context(figs)
    seg = ctx["ranking"].copy()
    n = len(seg)
    amp = np.linspace(3.0, 0.5, n)
    seg["amp_1m_m"] = amp[::-1]  # the smallest lensing-table row holds the largest amplitude
    seg["amp_reliable"] = [True] * (n - 1) + [False]  # the largest amplitude is not ranked by it
    order = np.argsort(-np.where(seg["amp_reliable"], seg["amp_1m_m"], -np.inf), kind="stable")
    rank = np.full(n, pd.NA, dtype=object)
    rank[order[: n - 1]] = np.arange(1, n)
    seg["rank_amplitude"] = pd.array(rank, dtype="Int64")
    ctx["ranking"], ctx["top_k"] = seg, 5
    cols, rows, shown = report._ranking_table(seg, 5, [], by="amplitude")
    assert shown == 5 and cols.index("Amplitude at 1 m, m (5–95 %)") < cols.index("Lensing factor (5–95 %)")
    assert "Reliable" not in cols
    want = seg.loc[seg["amp_reliable"]].sort_values("amp_1m_m", ascending=False)["segment_id"].head(5).tolist()
    assert [r[1] for r in rows] == want and [r[0] for r in rows] == ["1", "2", "3", "4", "5"]
    # no rank column: ranked by value among the segments amp_reliable takes; the others unranked
    cols2, rows2, _ = report._ranking_table(seg.drop(columns="rank_amplitude"), 5, [], by="amplitude")
    assert rows2[0][0] == "–" and rows2[0][1] == seg.loc[~seg["amp_reliable"], "segment_id"].iloc[0]
    assert [r[0] for r in rows2[1:]] == ["1", "2", "3", "4"]
    # placement: after the lensing table (true), before it ("first"), absent by default
    tables = lambda blocks: [b["caption"] for b in blocks if b["kind"] == "table"]  # noqa: E731
    assert tables(_section_blocks(ctx)) == ["Ranked coastline segments"]
    ctx["amplitude_ranking"] = True
    assert tables(_section_blocks(ctx)) == ["Ranked coastline segments",
                                            "Coastline segments ranked by indicative amplitude"]
    ctx["amplitude_ranking"] = "first"
    blocks = _section_blocks(ctx)
    assert tables(blocks) == ["Coastline segments ranked by indicative amplitude", "Ranked coastline segments"]
    assert blocks[0]["text"].startswith("The wave check held this ranking")
    ctx["amplitude_ranking"] = "yes"
    with pytest.raises(InputError, match="amplitude_ranking"):
        report.document_blocks(ctx)
