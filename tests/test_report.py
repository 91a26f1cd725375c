"""``velspec report``: PNG pictures and one HTML page that parses, whose tags balance, that refers
only to pictures that exist, and that carries the summary, the parameters and the caution."""

import json
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from clitools import run

import velspec
from velspec.caution import CAUTION
from velspec.synth import LineSpec, make_line

VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}
PNG = b"\x89PNG\r\n\x1a\n"   # PNG signature (ISO/IEC 15948, 2004)


class Page(HTMLParser):
    """Checks that every element is closed in order (html.parser of the standard library)."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.errors, self.images, self.links, self.text = [], [], [], [], []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "img":
            self.images.append(attrs.get("src"))
        if tag == "a":
            self.links.append(attrs.get("href"))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)
        if tag not in VOID:
            self.stack.pop()

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


def parse(path: Path) -> Page:
    page = Page()
    page.feed(path.read_text(encoding="utf-8"))
    page.close()
    return page


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    root = tmp_path_factory.mktemp("report")
    line = root / "line.sgy"
    make_line(line, LineSpec(ncmp=6, snr=6.0, nsamples=650, seed=4))
    result = velspec.run_line(line, velspec.RunParams().with_overrides(scan__nvel=80, keep_spectra=2))
    path = root / "result.h5"
    velspec.write_result(path, result)
    return {"root": root, "line": line, "path": path, "result": velspec.read_result(path)}


def check_page(folder: Path) -> Page:
    page = parse(folder / "index.html")
    assert not page.errors and not page.stack, (page.errors, page.stack)
    assert page.images, "the page shows no picture"
    for src in page.images:
        assert "/" not in src and (folder / src).is_file(), src
        assert (folder / src).read_bytes()[:8] == PNG, src
    ids = {a[1:] for a in page.links if a and a.startswith("#")}
    assert ids == {Path(s).stem for s in page.images}
    text = " ".join(" ".join(page.text).split())
    assert CAUTION in text
    return page


def test_page_without_the_line(made, tmp_path):
    out = tmp_path / "rep"
    page_path = velspec.report_result(made["path"], out)
    assert page_path == out / "index.html"
    page = check_page(out)
    r = made["result"]
    kept = [int(c) for c in r.spectra.cmp]
    assert sorted(page.images) == sorted([f"coherence_{c}.png" for c in kept] + ["fields.png", "quality.png"])
    # every picture in the folder is on the page, and the folder lists them
    assert {p.name for p in out.glob("*.png")} == set(page.images)
    listed = {f["name"] for f in json.loads((out / "contents.json").read_text())["files"]}
    assert listed == set(page.images) | {"index.html"}
    text = " ".join(" ".join(page.text).split())
    assert f"{r.cmp.size} (CMP {r.cmp[0]} to {r.cmp[-1]})" in text
    assert f"{int(r.used.sum())} used" in text
    for name in ("stretch_limit", "vint_max", "min_coherence"):   # the stored parameters
        assert name in text, name


def test_page_with_the_line_shows_gathers_and_stack(made, tmp_path, capsys):
    out = tmp_path / "rep"
    r = made["result"]
    cmp = int([c for c in r.cmp if c not in r.spectra.cmp][0])   # a CMP without a kept panel
    status, _, err = run(["report", made["path"], "--out", out, "--line", made["line"], "--cmp", cmp], capsys)
    assert status == 0, err
    assert "qualified people" in err
    page = check_page(out)
    assert f"gather_{cmp}.png" in page.images and "stack.png" in page.images
    assert f"coherence_{cmp}.png" not in page.images
    assert f"CMP {cmp}: the result keeps no coherence panel there" in " ".join(page.text)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["rep"]


def test_pictures_are_drawn_without_pyplot(made, tmp_path):
    # Figure + FigureCanvasAgg only: the caller's pyplot state and backend stay untouched
    code = ("import sys, velspec; velspec.report_result(sys.argv[1], sys.argv[2]); "
            "print('matplotlib.pyplot' in sys.modules)")
    done = subprocess.run([sys.executable, "-c", code, str(made["path"]), str(tmp_path / "rep")],
                          capture_output=True, text=True, check=True)
    assert done.stdout.strip() == "False"


def test_coherence_panel_draws_the_corridor(made):
    # the corridor of velspec.pick.velocity_bounds from the run's parameters
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from velspec.pick import velocity_bounds
    from velspec.qc import draw_coherence_panel

    r = made["result"]
    lo, hi = velocity_bounds(r.t0, r.params.pick, r.spectra.velocity[0], r.spectra.velocity[-1])
    lo, hi = lo * 1.1, hi * 0.9
    fig = Figure()
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    draw_coherence_panel(ax, r, int(r.spectra.cmp[0]), bounds=(lo, hi))
    lines = {ln.get_label(): ln for ln in ax.get_lines()}
    assert "velocity corridor" in lines
    assert np.allclose(lines["velocity corridor"].get_xdata(), lo)
    assert ax.get_xlabel() == "stacking velocity (m/s)" and ax.get_ylabel() == "t0 (s)"
