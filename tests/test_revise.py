"""``velspec revise`` and ``velspec picks`` on the command line: the line pass rerun from a result
file, a person's picks in replace and guide mode, guide functions for ``velspec run``, bad edit
files giving one ``velspec: error:`` line and nothing written, and the new datasets of the
result file."""

import csv
import hashlib
import json
import shutil

import h5py
import numpy as np
import pytest
from clitools import assert_user_error, no_output, run

from velspec.cli import main
from velspec.flags import EXCLUDED, Flag
from velspec.params import PickParams
from velspec.synth import LineSpec, make_line

EDITED, OUTSIDE_GUIDE, REPLACED = int(Flag.edited), int(Flag.outside_guide), int(Flag.replaced)

HEADER = ["cmp", "t0_s", "vrms_m_s", "sigma_m_s", "coherence", "flags", "used"]








def read(path):
    with h5py.File(path, "r") as h5:
        out = {}
        h5.visititems(lambda n, o: out.__setitem__(n, o[()]) if isinstance(o, h5py.Dataset) else None)
        out["attrs"] = dict(h5.attrs)
    return out


def read_csv(path):
    with open(path, newline="") as fh:
        lines = [ln for ln in fh if not ln.startswith("#")]
    rows = list(csv.reader(lines))
    return rows[0], rows[1:]


def write_csv(path, header, rows):
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        w.writerows(rows)
    return path


@pytest.fixture(scope="module")
def line(tmp_path_factory):
    path = tmp_path_factory.mktemp("line") / "line.sgy"
    make_line(path, LineSpec(ncmp=8, snr=4, nsamples=700, seed=2))
    return path


@pytest.fixture(scope="module")
def result(line):
    out = line.parent / "run.h5"
    assert main(["run", str(line), "--out", str(out), "--quiet"]) == 0
    return out


@pytest.fixture(scope="module")
def picks_csv(result):
    out = result.parent / "picks.csv"
    assert main(["picks", str(result), "--out", str(out)]) == 0
    return out


def edited_cmp(stored):
    return int(stored["cmp"][3])


def rows_of(picks_csv, cmp):
    header, rows = read_csv(picks_csv)
    return header, [r for r in rows if int(r[0]) == cmp and r[6] == "1"]


# -- revise without edits ------------------------------------------------------------------

def test_revise_without_edits_reproduces_the_run(result, tmp_path, capsys):
    # Expected: the run's own arrays (the line pass works on the stored picks; nothing rescanned).
    new = tmp_path / "new.h5"
    status, _, err = run(["revise", result, "--out", new, "--quiet"], capsys)
    assert status == 0, err
    a, b = read(result), read(new)
    for name in ("vrms", "vint", "vint_sigma", "picks/t0", "picks/vrms", "picks/flags", "picks/used", "qc/quality"):
        assert np.array_equal(a[name], b[name]), name
    assert b["attrs"]["revised_from"] == str(result) and int(b["attrs"]["edited_cmps"]) == 0


# -- picks CSV, replace mode ---------------------------------------------------------------

def test_picks_csv_columns(result, picks_csv):
    header, rows = read_csv(picks_csv)
    assert header == HEADER
    stored = read(result)
    assert len(rows) == stored["picks/t0"].size
    assert [int(r[6]) for r in rows] == stored["picks/used"].tolist()
    assert np.allclose([float(r[2]) for r in rows], stored["picks/vrms"], atol=0.006)


def test_revise_with_edited_picks_replaces_one_cmp(result, picks_csv, tmp_path, capsys):
    stored = read(result)
    cmp = edited_cmp(stored)
    header, rows = rows_of(picks_csv, cmp)
    assert len(rows) >= 3
    for r in rows:
        r[2] = f"{float(r[2]) * 1.05:.2f}"
    edits = write_csv(tmp_path / "edited.csv", header, rows)
    new = tmp_path / "new.h5"
    status, _, err = run(["revise", result, "--picks", edits, "--out", new], capsys)
    assert status == 0, err
    assert "1 CMP(s) edited" in err
    b = read(new)
    assert int(b["attrs"]["edited_cmps"]) == 1
    row = int(np.flatnonzero(stored["cmp"] == cmp)[0])
    t_edit = np.array([float(r[1]) for r in rows])
    # Expected: the person's velocities, 5 % above the automatic picks, at the picks' times
    # (the field passes through its picks: t V^2 linear between them, Dix 1955).
    before = np.interp(t_edit, stored["t0"], stored["vrms"][row])
    after = np.interp(t_edit, b["t0"], b["vrms"][row])
    assert np.allclose(after / before, 1.05, rtol=2e-3)
    others = np.arange(len(stored["cmp"])) != row
    assert np.array_equal(b["vrms"][others], stored["vrms"][others])
    assert np.array_equal(b["vint"][others], stored["vint"][others])
    sel = b["picks/cmp"] == cmp
    flags, used = b["picks/flags"][sel], b["picks/used"][sel]
    edited = (flags & EDITED) != 0
    assert edited.sum() == len(rows) and used[edited].all()
    assert np.allclose(b["picks/vrms"][sel][edited], [float(r[2]) for r in rows], atol=0.01)
    assert np.all(flags[~edited] & REPLACED) and not used[~edited].any()
    old = stored["picks/cmp"] != cmp
    assert np.array_equal(b["picks/flags"][b["picks/cmp"] != cmp], stored["picks/flags"][old])


def test_revise_guide_mode_uses_the_persons_picks_far_from_the_automatic_ones(result, picks_csv, tmp_path, capsys):
    stored = read(result)
    cmp = edited_cmp(stored)
    header, rows = rows_of(picks_csv, cmp)
    for r in rows:
        r[2] = f"{float(r[2]) * 1.30:.2f}"            # 30 % above: beyond the band (15 % below)
    guide = write_csv(tmp_path / "guide.csv", header, rows)
    new = tmp_path / "new.h5"
    status, _, err = run(["revise", result, "--picks", guide, "--edit-mode", "guide", "--out", new, "--quiet"],
                         capsys)
    assert status == 0, err
    b = read(new)
    sel = b["picks/cmp"] == cmp
    flags, used, v = b["picks/flags"][sel], b["picks/used"][sel] == 1, b["picks/vrms"][sel]
    auto = (flags & EDITED) == 0
    was_used = stored["picks/used"][stored["picks/cmp"] == cmp] == 1
    assert np.all(flags[auto][was_used] & OUTSIDE_GUIDE)
    assert not used[auto].any()
    assert np.array_equal(used, ~auto)
    assert np.allclose(np.sort(v[used]), np.sort([float(r[2]) for r in rows]), atol=0.01)


def test_run_guided_by_a_persons_function_picks_inside_its_band(line, result, picks_csv, tmp_path, capsys):
    stored = read(result)
    cmp = edited_cmp(stored)
    header, rows = rows_of(picks_csv, cmp)
    for r in rows:
        r[2] = f"{float(r[2]) * 1.20:.2f}"            # 20 % above the automatic picks
    guide = write_csv(tmp_path / "guide.csv", header, rows)
    g_t = np.array([float(r[1]) for r in rows])
    g_v = np.array([float(r[2]) for r in rows])
    pp = PickParams()
    lo_f, hi_f = 1 - pp.guide_below, 1 + pp.guide_above

    def band_check(t, v, slack):
        g = np.interp(t, g_t, g_v)                   # the person's function, linear between rows
        return (v >= g * lo_f - slack) & (v <= g * hi_f + slack)

    auto = (stored["picks/cmp"] == cmp) & (stored["picks/used"] == 1)
    assert not band_check(stored["picks/t0"][auto], stored["picks/vrms"][auto], 0.0).all()  # can fail
    out = tmp_path / "x.h5"
    status, _, err = run(["run", line, "--picks", guide, "--edit-mode", "guide", "--out", out, "--quiet"], capsys)
    assert status == 0, err
    b = read(out)
    sel = (b["picks/cmp"] == cmp) & (b["picks/used"] == 1)
    assert sel.sum() >= 1
    # half a trial-velocity step of slack: a peak is refined to sub-sample velocity by a parabola
    vel = b["spectra/velocity"]
    step = float(np.max(np.diff(vel)))
    assert band_check(b["picks/t0"][sel], b["picks/vrms"][sel], 0.5 * step).all()
    # no automatic pick at that CMP is replaced: the person's function only guided the picker
    assert not np.any(b["picks/flags"][b["picks/cmp"] == cmp] & (EDITED | REPLACED))


# -- guide functions of velspec run --------------------------------------------------------

def test_run_with_the_regional_guide(line, tmp_path, capsys):
    out = tmp_path / "x.h5"
    status, _, err = run(["run", line, "--guide", "regional", "--out", out, "--quiet"], capsys)
    assert status == 0, err
    b = read(out)
    pp = PickParams()
    # v(z) = v0 + k z gives the RMS velocity v0 sqrt((exp(k t) - 1) / (k t)) at two-way time t
    # (integrating Dix's 1955 RMS definition over a linear velocity-depth law), written out here.
    t, v = b["picks/t0"], b["picks/vrms"]
    k = pp.regional_gradient
    trend = pp.regional_v0 * np.sqrt(np.expm1(k * t) / (k * t))
    step = float(np.max(np.diff(b["spectra/velocity"])))
    used = b["picks/used"] == 1
    assert used.sum() > 0
    assert np.all(v[used] >= trend[used] * (1 - pp.guide_below) - 0.5 * step)
    assert np.all(v[used] <= trend[used] * (1 + pp.guide_above) + 0.5 * step)
    assert json.loads(b["attrs"]["parameters"])["pick"]["guide"] == "regional"


def test_run_with_a_missing_guide_file(line, tmp_path, capsys):
    status, _, err = run(["run", line, "--guide", tmp_path / "missing.csv", "--out", tmp_path / "x.h5"], capsys)
    assert_user_error(status, err, "missing.csv")
    assert no_output(tmp_path) == []


# -- bad edit files ------------------------------------------------------------------------

BAD = {
    "missing_column": (["cmp", "t0_s"], [["{cmp}", "1.0"]], "vrms_m_s"),
    "not_a_number": (["cmp", "t0_s", "vrms_m_s"], [["{cmp}", "1.0", "fast"]], "number"),
    "times_not_increasing": (["cmp", "t0_s", "vrms_m_s"], [["{cmp}", "1.2", "2000"], ["{cmp}", "0.9", "1900"]],
                             "increase"),
    "cmp_not_in_result": (["cmp", "t0_s", "vrms_m_s"], [["99999", "1.0", "2000"]], "99999"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_edit_file(case, result, tmp_path, capsys):
    header, rows, word = BAD[case]
    cmp = str(edited_cmp(read(result)))
    edits = write_csv(tmp_path / "edits.csv", header, [[c.format(cmp=cmp) for c in r] for r in rows])
    status, _, err = run(["revise", result, "--picks", edits, "--out", tmp_path / "new.h5"], capsys)
    assert_user_error(status, err, word)
    assert no_output(tmp_path) == []


@pytest.mark.parametrize("row, word", [(["1001", "1.0", "x"], "number"), (["99999", "1.0", "2000"], "99999")],
                         ids=["not_a_number", "cmp_not_in_line"])
def test_bad_edit_file_for_run(row, word, line, tmp_path, capsys):
    edits = write_csv(tmp_path / "edits.csv", ["cmp", "t0_s", "vrms_m_s"], [row])
    status, _, err = run(["run", line, "--picks", edits, "--out", tmp_path / "x.h5", "--quiet"], capsys)
    assert_user_error(status, err, word)
    assert no_output(tmp_path) == []


def test_run_guide_mode_rejects_picks_for_a_cmp_not_in_the_line(line, tmp_path, capsys):
    edits = write_csv(tmp_path / "edits.csv", ["cmp", "t0_s", "vrms_m_s"], [["99999", "1.0", "2000"]])
    status, _, err = run(["run", line, "--picks", edits, "--edit-mode", "guide", "--out", tmp_path / "x.h5",
                          "--quiet"], capsys)
    assert_user_error(status, err, "99999")
    assert no_output(tmp_path) == []


def test_revise_onto_its_own_input(result, tmp_path, capsys):
    copy = tmp_path / "r.h5"
    shutil.copy(result, copy)
    digest = hashlib.sha256(copy.read_bytes()).hexdigest()
    status, _, err = run(["revise", copy, "--out", copy, "--force"], capsys)
    assert_user_error(status, err, "--out")
    assert hashlib.sha256(copy.read_bytes()).hexdigest() == digest
    assert no_output(tmp_path) == ["r.h5"]


def test_existing_output_needs_force(result, picks_csv, tmp_path, capsys):
    for argv in (["revise", result], ["picks", result]):
        out = tmp_path / "taken.h5"
        out.write_bytes(b"keep me")
        status, _, err = run(argv + ["--out", out], capsys)
        assert_user_error(status, err, "exists", "--force")
        assert out.read_bytes() == b"keep me"
        assert no_output(tmp_path) == ["taken.h5"]


# -- the new datasets of the result file ---------------------------------------------------

def test_result_file_has_uncertainties_flags_and_quality(result):
    with h5py.File(result, "r") as h5:
        npick = h5["picks/t0"].shape[0]
        ncmp, nt = h5["vrms"].shape
        expect = {"picks/sigma": ("float32", (npick,), "m/s"), "picks/flags": ("uint16", (npick,), "1"),
                  "picks/used": ("uint8", (npick,), "1"), "picks/vint_sigma": ("float32", (npick,), "m/s"),
                  "vint_sigma": ("float32", (ncmp, nt), "m/s"), "qc/quality": ("uint8", (ncmp,), "1")}
        for name, (dtype, shape, units) in expect.items():
            ds = h5[name]
            assert ds.dtype == dtype and ds.shape == shape, name
            assert ds.attrs["units"] == units, name
        bits = json.loads(h5["picks/flags"].attrs["bits"])
        values = [int(k) for k in bits]
        assert all(v > 0 and v & (v - 1) == 0 for v in values)         # each key one bit
        assert len(set(bits.values())) == len(bits) and all(isinstance(s, str) and s for s in bits.values())
        flags = h5["picks/flags"][:]
        assert np.all(flags & ~np.uint16(sum(values)) == 0)           # every bit set is named
        assert np.array_equal(h5["picks/used"][:], ((flags & EXCLUDED) == 0).astype(np.uint8))
        sigma = h5["picks/sigma"][:]
        assert np.isfinite(sigma).all() and (sigma > 0).all()
        vs = h5["picks/vint_sigma"][:]
        used = h5["picks/used"][:] == 1
        assert np.isfinite(vs[used]).all() and (vs[used] > 0).all()
        assert np.isnan(vs[~used]).all()
        assert np.isfinite(h5["vint_sigma"][:]).all() and (h5["vint_sigma"][:] > 0).all()
        assert set(np.unique(h5["qc/quality"][:]).tolist()) <= {0, 1, 2}
