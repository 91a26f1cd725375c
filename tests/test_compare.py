"""``velspec compare`` and ``velspec.compare_results``: what differs, where, and the exit status;
and the determinism of a run (same bits for any thread count and block size) checked with it."""

import json
import xml.etree.ElementTree as ET

import h5py
import numpy as np
import pytest
from clitools import assert_user_error, run

import velspec
from velspec.compare import CompareParams, compare_results
from velspec.flags import Flag
from velspec.io.hdf5 import read_result, write_result
from velspec.synth import LineSpec, make_line


@pytest.fixture(scope="module")
def line(tmp_path_factory):
    path = tmp_path_factory.mktemp("cmpline") / "line.sgy"
    make_line(path, LineSpec(ncmp=10, snr=5.0, nsamples=450, seed=3))
    return path


@pytest.fixture(scope="module")
def result(line):
    return velspec.run_line(line, {"scan": {"nvel": 60}, "threads": 1})


@pytest.fixture(scope="module")
def stored(result, tmp_path_factory):
    path = tmp_path_factory.mktemp("cmpres") / "a.h5"
    write_result(path, result)
    return path


def _isclose_outside(a, b, rtol, atol):
    # the reference: numpy.isclose's rule, |a - b| <= atol + rtol * |b|
    return ~np.isclose(np.asarray(a, np.float64), np.asarray(b, np.float64), rtol=rtol, atol=atol, equal_nan=True)


def test_identical_files_and_files_differing_only_in_creation_time_pass(stored, result, tmp_path, capsys):
    again = tmp_path / "b.h5"
    write_result(again, result.replace(attrs=dict(result.attrs, created="1999-01-01T00:00:00+00:00")))
    with h5py.File(again, "r") as h5:
        assert h5.attrs["created"] != read_result(stored).attrs["created"]
    for other in (stored, again):
        report = compare_results(stored, other, params=CompareParams.exact())
        assert report.passed, report.summary()
        assert report.provenance == [] and report.parameters == []
        assert report.picks.matched == result.picks.size
        status, out, err = run(["compare", stored, other, "--exact"], capsys)
        assert status == 0 and "within tolerance" in out and err == ""


def test_a_three_percent_band_is_found_where_it_is(stored, result, tmp_path, capsys):
    band = (result.t0 >= 1.0) & (result.t0 <= 1.4)
    vrms = result.vrms.copy()
    vrms[:, band] *= np.float32(1.03)
    changed = tmp_path / "changed.h5"
    write_result(changed, result.replace(vrms=vrms))
    report = compare_results(changed, stored, rtol=0.01, atol=1.0)
    f = report.field("vrms")
    assert not report.passed and not f.passed
    # the count agrees with numpy.isclose, the reference implementation of the rule
    expect = _isclose_outside(vrms, result.vrms, 0.01, 1.0)
    assert f.outside_count == expect.sum() == band.sum() * result.cmp.size
    # where: every CMP, only inside 1.0-1.4 s
    assert [r["cmp"] for r in f.outside] == result.cmp.tolist()
    for r in f.outside:
        assert r["first"] == pytest.approx(result.t0[band][0]) and r["last"] == pytest.approx(result.t0[band][-1])
        assert r["rel_max"] == pytest.approx(0.03, rel=1e-5)
    assert f.rel_max == pytest.approx(0.03, rel=1e-5)
    assert f.rel_median == 0.0   # most samples are outside the band
    for w in f.worst:
        assert 1.0 <= w["t0"] <= 1.4
    assert report.field("vint").passed and report.picks.passed
    # the command line: exit 1, and the summary names the CMPs and times
    status, out, err = run(["compare", changed, stored, "--rtol", "0.01"], capsys)
    assert status == 1 and err == ""
    span = f"t0 {result.t0[band][0]:g}..{result.t0[band][-1]:g}"
    assert f"CMP {result.cmp[0]}: {band.sum()} value(s) outside, {span}" in out and "OUTSIDE" in out
    # a tolerance wider than the change passes it
    assert compare_results(changed, stored, rtol=0.031).passed


def test_tolerance_rule_is_numpy_isclose(result):
    rng = np.random.default_rng(4)
    vrms = result.vrms * (1 + rng.normal(0, 0.002, result.vrms.shape)).astype(np.float32)
    for rtol, atol in ((0.0, 0.0), (0.001, 0.0), (0.0, 5.0), (0.002, 2.0)):
        f = compare_results(result.replace(vrms=vrms), result, rtol=rtol, atol=atol).field("vrms")
        assert f.outside_count == _isclose_outside(vrms, result.vrms, rtol, atol).sum()
        d = np.abs(vrms.astype(np.float64) - result.vrms)
        assert f.abs_max == pytest.approx(d.max()) and f.abs_median == pytest.approx(np.median(d))
        assert f.abs_p95 == pytest.approx(np.percentile(d, 95))


def test_picks_added_removed_moved_and_flags_changed(result):
    p = result.picks.copy()
    cmp0 = int(p["cmp"][0])
    first = np.flatnonzero(p["cmp"] == cmp0)
    gone = first[0]                       # a pick B has no longer
    moved_t, moved_v, flagged = first[1], first[2], first[3]
    p["t0"][moved_t] += 0.01              # beyond t0_atol, inside the match window
    p["vrms"][moved_v] *= 1.02            # beyond rtol
    p["flags"][flagged] = p["flags"][flagged] | int(Flag.lateral_outlier)
    new = p[:1].copy()
    new["cmp"], new["t0"], new["vrms"], new["flags"] = cmp0, p["t0"].max() + 0.3, 3000.0, int(Flag.edited)
    b = np.delete(p, gone)
    b = np.sort(np.concatenate([b, new]), order=["cmp", "t0"])
    report = compare_results(result.replace(picks=b), result, params=CompareParams())
    picks = report.picks
    assert not picks.passed and not report.passed
    assert [r["t0"] for r in picks.removed] == pytest.approx([result.picks["t0"][gone]])
    assert picks.removed[0]["cmp"] == cmp0
    # A is checked against the reference B: the pick only A has counts as added
    assert len(picks.added) == 1 and picks.added[0]["vrms"] == 3000.0 and picks.added[0]["flag_names"] == ["edited"]
    assert len(picks.moved) == 2
    assert sorted(r["t0_a"] - r["t0_b"] for r in picks.moved)[-1] == pytest.approx(0.01)
    assert len(picks.flags_changed) == 1
    changed = picks.flags_changed[0]
    assert changed["gained"] == ["lateral_outlier"] and changed["lost"] == []
    assert picks.matched == result.picks.size - 1
    # the other fields are the same
    assert report.field("vrms").passed


def test_axes_that_differ_are_compared_on_what_is_common(result):
    fewer = result.replace(cmp=result.cmp[1:], cmp_x=result.cmp_x[1:], cmp_y=result.cmp_y[1:],
                           vrms=result.vrms[1:, :400], vint=result.vint[1:, :400],
                           vint_sigma=result.vint_sigma[1:, :400], t0=result.t0[:400], depth=None,
                           picks=result.picks[result.picks["cmp"] != result.cmp[0]])
    report = compare_results(result, fewer)
    assert not report.axes.passed and not report.passed
    assert report.axes.only_in_a == [int(result.cmp[0])] and report.axes.only_in_b == []
    assert report.axes.common_cmps == result.cmp.size - 1 and report.axes.common_t0 == 400
    f = report.field("vrms")
    assert f.compared and f.passed and f.values == (result.cmp.size - 1) * 400
    assert not report.field("depth/vint").compared and "only A" in report.field("depth/vint").note
    assert all(r["cmp"] == result.cmp[0] for r in report.picks.removed)
    assert "only in A: " + str(result.cmp[0]) in report.summary()


def test_parameters_and_versions_that_differ_are_named(result):
    attrs = json.loads(json.dumps(result.attrs))
    attrs["parameters"]["scan"]["nvel"] = 99
    attrs["parameters"]["pick"]["bounds"] = [[0.5, 1500.0, 3000.0]]
    attrs["velspec_version"] = "0.0.9"
    attrs["input"]["checksum"] = "sha256:0"
    attrs["created"] = "2000-01-01T00:00:00+00:00"
    report = compare_results(result.replace(attrs=attrs), result)
    assert report.passed   # reported, not judged
    assert {r["key"] for r in report.parameters} == {"scan.nvel", "pick.bounds"}
    assert {r["key"] for r in report.provenance} == {"velspec_version", "input.checksum"}
    nvel = next(r for r in report.parameters if r["key"] == "scan.nvel")
    assert (nvel["a"], nvel["b"]) == (99, 60)


def test_json_junit_and_picture_reports(stored, result, tmp_path, capsys):
    vrms = result.vrms.copy()
    vrms[2:4, 100:150] += 40
    changed = tmp_path / "changed.h5"
    write_result(changed, result.replace(vrms=vrms))
    out = {k: tmp_path / f"r.{k}" for k in ("json", "xml", "png")}
    status, _, err = run(["compare", changed, stored, "--report", out["json"], "--junit", out["xml"],
                          "--picture", out["png"], "--quiet"], capsys)
    assert status == 1 and err == ""
    data = json.loads(out["json"].read_text(), parse_constant=lambda c: pytest.fail(f"non-standard JSON {c}"))
    assert data["passed"] is False and "numpy.isclose" in data["rule"] and "qualified" in data["caution"]
    vr = next(f for f in data["fields"] if f["name"] == "vrms")
    assert [r["cmp"] for r in vr["outside"]] == result.cmp[2:4].tolist()
    # JUnit: testsuites / testsuite / testcase, failure elements with a message (parsed by xml.etree)
    root = ET.parse(out["xml"]).getroot()
    assert root.tag == "testsuites"
    suites = root.findall("testsuite")
    assert len(suites) == 1
    cases = suites[0].findall("testcase")
    assert int(suites[0].get("tests")) == len(cases) == int(root.get("tests"))
    failed = [c.get("name") for c in cases if c.find("failure") is not None]
    assert failed == ["field vrms"] and int(suites[0].get("failures")) == 1
    message = cases[[c.get("name") for c in cases].index("field vrms")].find("failure").get("message")
    assert "100 of" in message and "outside" in message
    assert {"axes", "field vint", "picks", "parameters", "provenance"} <= {c.get("name") for c in cases}
    assert all(c.get("classname") for c in cases)
    # picture: a PNG (signature of the PNG standard, ISO/IEC 15948) that matplotlib reads back
    assert out["png"].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    import matplotlib.image

    img = matplotlib.image.imread(out["png"])
    assert img.shape[0] > 300 and img.shape[1] > 600
    # an existing report is kept without --force
    before = out["json"].read_bytes()
    status, _, err = run(["compare", changed, stored, "--report", out["json"]], capsys)
    assert_user_error(status, err, "exists", "--force")
    assert out["json"].read_bytes() == before


def test_bad_input_exits_2_and_writes_nothing(stored, tmp_path, capsys):
    text = tmp_path / "notes.txt"
    text.write_text("not a result\n")
    other_h5 = tmp_path / "other.h5"
    with h5py.File(other_h5, "w") as h5:
        h5["x"] = np.zeros(3)
    report = tmp_path / "rep.json"
    cases = [
        (["compare", stored, tmp_path / "missing.h5", "--report", report], ("missing.h5", "no such file")),
        (["compare", text, stored, "--report", report], ("not an HDF5",)),
        (["compare", stored, other_h5, "--report", report], ("not a velspec result",)),
        (["compare", stored, tmp_path, "--report", report], ("not a file",)),
        (["compare", stored, stored, "--rtol", "-1", "--report", report], ("rtol", ">= 0")),
        (["compare", stored, stored, "--exact", "--atol", "1", "--report", report], ("--exact",)),
        (["compare", stored, stored, "--atol", "nan", "--report", report], ("atol",)),
        (["compare", stored, "--report", report], ("required",)),
        (["compare", stored, stored, "--report", report, "--junit", report], ("different files",)),
        (["compare", stored, stored, "--report", tmp_path / "no" / "rep.json"], ("does not exist",)),
    ]
    for argv, words in cases:
        status, _, err = run(argv, capsys)
        assert_user_error(status, err, *words)
        assert not report.exists()
        assert not list(tmp_path.glob("*.partial"))


@pytest.mark.parametrize("threads,block", [(1, 1), (1, 7), (2, 7), (2, 16), (1, 16)])
def test_same_bits_for_any_thread_count_and_block_size(line, result, threads, block):
    # common practice, no source: a parallel run must not depend on how the work is split
    other = velspec.run_line(line, {"scan": {"nvel": 60}, "threads": threads, "block": block})
    report = compare_results(other, result, params=CompareParams.exact())
    assert report.passed, report.summary()
    keys = {r["key"] for r in report.parameters}
    assert keys <= {"threads", "block"}
    for name in ("vrms", "vint", "vint_sigma"):
        assert np.array_equal(getattr(other, name), getattr(result, name), equal_nan=True), name
    assert np.array_equal(other.depth.vint, result.depth.vint, equal_nan=True)
    for column in other.picks.dtype.names:
        assert np.array_equal(other.picks[column], result.picks[column], equal_nan=True), column
    assert np.array_equal(other.spectra.coherence, result.spectra.coherence)


def test_a_persons_picks_pair_with_the_automatic_ones_they_replace(result):
    # velspec revise keeps the replaced automatic picks beside the person's, at the same times
    cmp0 = int(result.cmp[1])
    p = result.picks.copy()
    mine = np.flatnonzero((p["cmp"] == cmp0) & result.used)
    person = p[mine].copy()
    person["flags"] = int(Flag.edited)
    person["t0"] = np.round(person["t0"], 6)          # as a CSV keeps them
    person["vrms"] = np.round(person["vrms"], 2)
    person["vrms"][-1] *= np.float32(1.03)            # the one the person moved
    p["flags"][mine] |= int(Flag.replaced)
    a = np.sort(np.concatenate([p, person]), order=["cmp", "t0"])
    report = compare_results(result.replace(picks=a), result)
    picks = report.picks
    assert [r["t0_b"] for r in picks.moved] == pytest.approx([result.picks["t0"][mine[-1]]])
    assert all(r["gained"] == ["edited"] for r in picks.flags_changed) and len(picks.flags_changed) == mine.size
    assert len(picks.added) == mine.size and all("replaced" in r["flag_names"] for r in picks.added)
    assert picks.removed == []


def test_exact_finds_what_the_default_tolerance_lets_pass(result, capsys, tmp_path):
    tiny = result.vrms.copy()
    tiny[0, 10] = np.nextafter(tiny[0, 10], np.float32(np.inf))   # one float32 step (IEEE 754)
    a, b = tmp_path / "a.h5", tmp_path / "b.h5"
    write_result(a, result.replace(vrms=tiny))
    write_result(b, result)
    assert compare_results(a, b).passed
    report = compare_results(a, b, params=CompareParams.exact())
    assert not report.passed and report.field("vrms").outside_count == 1
    assert report.field("vrms").outside[0]["cmp"] == result.cmp[0]
    assert run(["compare", a, b, "--quiet"], capsys)[0] == 0
    assert run(["compare", a, b, "--exact", "--quiet"], capsys)[0] == 1
