"""``velspec export``: SEG-Y sections that round-trip through segyio at the rev 1 byte positions,
CSV functions, NMO and stack against the published moveout, depth against the generated model,
and bad input giving one ``velspec: error:`` line, exit 2 and no half-written folder."""

import csv
import shutil
import struct

import h5py
import numba
import numpy as np
import pytest
import segyio
from clitools import assert_user_error, run
from conftest import ricker

import velspec
from velspec.export import export_result, rms_from_interval
from velspec.nmo import mute_factor, nmo_correct, nmo_stack
from velspec.result import RegularisedField
from velspec.scan.moveout import HYPERBOLIC, positions
from velspec.synth import LineSpec, make_line

NSAMPLES = 700


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    """A generated 8-CMP line, its truth and its result file."""
    root = tmp_path_factory.mktemp("export")
    line = root / "line.sgy"
    truth = make_line(line, LineSpec(ncmp=8, snr=6.0, nsamples=NSAMPLES, seed=2))
    result = velspec.run_line(line, velspec.RunParams().with_overrides(scan__nvel=80, keep_spectra=3))
    path = root / "result.h5"
    velspec.write_result(path, result)
    return {"root": root, "line": line, "truth": truth, "path": path, "result": velspec.read_result(path)}


@pytest.fixture(scope="module")
def exported(made):
    out = made["root"] / "products"
    export_result(made["path"], out, line=made["line"], cmps=[1003, 1006])
    return out


def raw_header_int(path, byte, size, trace=None):
    """A big-endian integer read straight from the file at a 1-based SEG-Y byte position."""
    with open(path, "rb") as fh:
        if trace is None:
            fh.seek(byte - 1)
        else:
            ns = struct.unpack(">H", open(path, "rb").read()[3220:3222])[0]
            fh.seek(3600 + trace * (240 + 4 * ns) + byte - 1)
        return int.from_bytes(fh.read(size), "big", signed=True)


# -- SEG-Y round trip (SEG-Y rev 1, 2002; segyio as the reference reader) -------------------------

@pytest.mark.parametrize("name, domain", [("vrms.sgy", "time"), ("vint_time.sgy", "time"),
                                          ("vint_depth.sgy", "depth"), ("time_depth.sgy", "depth"),
                                          ("vavg_depth.sgy", "depth"), ("vint_time_smooth.sgy", "time"),
                                          ("vrms_smooth.sgy", "time"), ("stack.sgy", "time")])
def test_sections_round_trip_through_segyio_at_rev1_byte_positions(made, exported, name, domain):
    r = made["result"]
    path = exported / name
    nsamp = r.t0.size if domain == "time" else r.depth.z.size
    with segyio.open(path, ignore_geometry=True) as f:
        assert f.tracecount == r.cmp.size
        # trace header: CDP 21, scalar 71, source X/Y 73/77, group X/Y 81/85, CDP X/Y 181/185
        assert np.array_equal(f.attributes(21)[:], r.cmp)
        scalar = f.attributes(71)[:]
        assert np.all(scalar == -100)
        for byte, want in ((181, r.cmp_x), (185, r.cmp_y), (73, r.cmp_x), (77, r.cmp_y), (81, r.cmp_x),
                           (85, r.cmp_y)):
            # rev 1: a negative scalar divides
            assert np.allclose(f.attributes(byte)[:] / 100.0, want, atol=0.005), byte
        assert np.all(f.attributes(115)[:] == nsamp)
        step = 4000 if domain == "time" else int(round(1000 * (r.depth.z[1] - r.depth.z[0])))
        assert np.all(f.attributes(117)[:] == step)
        assert f.bin[segyio.BinField.Interval] == step and f.bin[segyio.BinField.Samples] == nsamp
        assert f.bin[segyio.BinField.Format] == 5 and f.bin[segyio.BinField.MeasurementSystem] == 1
        values = f.trace.raw[:]
    # the same fields read without segyio, at the standard's byte positions
    assert raw_header_int(path, 3217, 2) == step and raw_header_int(path, 3221, 2) == nsamp
    assert raw_header_int(path, 3225, 2) == 5 and raw_header_int(path, 3255, 2) == 1
    assert raw_header_int(path, 3501, 2) == 0x0100          # rev 1.0
    assert raw_header_int(path, 21, 4, trace=3) == r.cmp[3]
    # samples: big-endian IEEE float32 (format code 5) right after the 240-byte trace header
    first = np.frombuffer(open(path, "rb").read()[3600 + 240: 3600 + 240 + 4 * nsamp], dtype=">f4")
    assert np.array_equal(first, values[0])
    # rev 1 textual header: 3200 bytes of EBCDIC, 40 lines, what the values are and the caution
    text = open(path, "rb").read()[:3200].decode("cp037")
    assert text.startswith("C 1 ") and "C39 SEG Y REV1" in text and "C40 END TEXTUAL HEADER" in text
    flat = " ".join(text[i * 80 + 4: (i + 1) * 80] .strip() for i in range(40))
    for word in ("velspec", "first-pass", "qualified", "regulations", "licensed"):
        assert word in flat, word
    assert ("DEPTH" in flat) == (domain == "depth")
    if name != "stack.sgy":
        assert "m/s" in flat or "two-way time, s" in flat
    # the interval section holds the line-wide regularised field when the result has one
    vint = r.regularised.vint if r.regularised is not None else r.vint
    expect = {"vrms.sgy": r.vrms, "vint_time.sgy": vint, "vint_depth.sgy": r.depth.vint,
              "time_depth.sgy": r.depth.t0}.get(name)
    if expect is not None:
        assert values.dtype == np.float32 and np.array_equal(values, np.asarray(expect, np.float32))


def test_regularised_interval_field_is_exported_when_the_result_has_one(made, tmp_path):
    r = made["result"]
    reg = RegularisedField(vint=(r.vint * np.float32(1.01)).astype(np.float32), vrms=r.vrms)
    export_result(r.replace(regularised=reg), tmp_path / "p")
    with segyio.open(tmp_path / "p" / "vint_time.sgy", ignore_geometry=True) as f:
        assert np.array_equal(f.trace.raw[:], reg.vint)
        assert b"/regularised/vint" in f.text[0]
    header = open(tmp_path / "p" / "functions.csv").read().splitlines()[2]
    assert header.endswith(",vint_regularised_m_s")


def test_csv_functions_hold_the_fields_with_units_and_the_caution(made, exported):
    r = made["result"]
    lines = (exported / "functions.csv").read_text().splitlines()
    assert lines[0].startswith("#") and "qualified people" in lines[0] and "regulations" in lines[0]
    rows = list(csv.DictReader(ln for ln in lines if not ln.startswith("#")))
    assert set(rows[0]) >= {"cmp", "x_m", "y_m", "t0_s", "vrms_m_s", "vint_m_s", "vint_sigma_m_s", "depth_m"}
    assert {int(row["cmp"]) for row in rows} == set(r.cmp.tolist())
    for row in rows[::17]:
        k = r.row(int(row["cmp"]))
        j = int(round(float(row["t0_s"]) / 0.004))
        assert abs(float(row["vrms_m_s"]) - r.vrms[k, j]) <= 0.05
        assert abs(float(row["vint_m_s"]) - r.vint[k, j]) <= 0.05
        assert abs(float(row["x_m"]) - r.cmp_x[k]) <= 0.005
        # depth of a time: z = integral of vint / 2 dt (Dix, 1955), here from the result's t(z)
        assert abs(float(row["depth_m"]) - np.interp(float(row["t0_s"]), r.depth.t0[k], r.depth.z)) <= 0.05
    picks = list(csv.DictReader(ln for ln in (exported / "functions_at_picks.csv").read_text().splitlines()
                                if not ln.startswith("#")))
    assert len(picks) == int(r.used.sum())
    assert np.allclose([float(p["pick_vrms_m_s"]) for p in picks], r.picks["vrms"][r.used], atol=0.05)


def test_readme_in_the_folder_lists_every_file(exported):
    listed = (exported / "README.txt").read_text()
    for path in exported.iterdir():
        if path.name not in ("README.txt", "contents.json"):
            assert path.name in listed, path.name
    assert "qualified people" in listed


# -- depth against the generated model (Dix, 1955, Seismic velocities from surface measurements,
#    Geophysics 20; the model's layer thicknesses from the generator) -------------------------------

def test_depth_of_the_deepest_reflector_within_three_percent(made, exported):
    r, truth = made["result"], made["truth"]
    with segyio.open(exported / "time_depth.sgy", ignore_geometry=True) as f:
        t_of_z = f.trace.raw[:]
        z = np.asarray(f.samples, dtype=np.float64)      # the depth step in mm shows as metres
    assert np.allclose(z, r.depth.z)
    for row, cmp in enumerate(r.cmp):
        b = int(np.flatnonzero(truth.cmp == cmp)[0])
        k = int(np.flatnonzero(truth.t0[b] < r.t0[-1] - 0.1)[-1])   # deepest reflector inside the record
        depth = np.interp(truth.t0[b, k], t_of_z[row], z)
        model = truth.thickness[b, : k + 1].sum()
        assert abs(depth - model) / model < 0.03, (cmp, depth, model)


# -- Dix's relation (Dix, 1955) for the smoothed field's stacking velocity ------------------------

def test_rms_from_interval_is_dix_forward():
    t0 = np.arange(0, 2.0, 0.004)
    vint = np.where(t0 <= 0.8, 1800.0, 3000.0)[None, :]
    v = rms_from_interval(t0, vint)[0]
    # two layers: V^2 t = v1^2 t1 + v2^2 (t - t1)
    t = 1.6
    expect = np.sqrt((1800.0**2 * 0.8 + 3000.0**2 * (t - 0.8)) / t)
    assert abs(v[np.argmin(np.abs(t0 - t))] - expect) / expect < 1e-5
    assert v[0] == np.float32(1800.0)


def test_unsmoothed_export_gives_back_the_stacking_velocity(made, tmp_path):
    # with no smoothing the Dix forward of the interval field is the stacking velocity it came
    # from: /regularised/vrms for the regularised field, /vrms for the per-CMP Dix wherever the
    # bounds did not force vint
    r = made["result"]
    export_result(r, tmp_path / "p", smooth_time=0, smooth_cmps=0)
    with segyio.open(tmp_path / "p" / "vrms_smooth.sgy", ignore_geometry=True) as f:
        back = f.trace.raw[:]
    if r.regularised is not None:
        assert np.allclose(back, r.regularised.vrms, rtol=1e-4)
    else:
        free = ~np.cumsum(r.qc["vint_forced"], axis=1).astype(bool)
        assert np.allclose(back[free], r.vrms[free], rtol=1e-4)


# -- NMO and stack (Yilmaz, 2001, Seismic Data Analysis, SEG: t(x) = sqrt(t0^2 + x^2/v^2)) ---------

def single_event(t0_event, v, offsets, dt=0.004, ns=600, f=25.0, eta=0.0):
    t = np.arange(ns) * dt
    x2 = offsets**2
    tx2 = t0_event**2 + x2 / v**2
    if eta:
        # Alkhalifah & Tsvankin (1995), Geophysics 60: the nonhyperbolic term
        tx2 = tx2 - 2 * eta * x2**2 / (v**2 * (t0_event**2 * v**2 + (1 + 2 * eta) * x2))
    return ricker(t[None, :] - np.sqrt(tx2)[:, None], f).astype(np.float32)


@pytest.mark.parametrize("eta", [0.0, 0.1])
def test_nmo_with_the_true_velocity_flattens_an_event_within_one_sample(eta):
    offsets = np.arange(100.0, 2500.0, 50.0)
    v, t0e, dt = 2200.0, 1.2, 0.004
    data = single_event(t0e, v, offsets, eta=eta)
    etas = None if eta == 0 else np.full(data.shape[1], eta)
    corrected, live = nmo_correct(data, offsets, dt, 0.0, np.full(data.shape[1], v), stretch_limit=0.5, eta=etas)
    j = int(round(t0e / dt))
    window = slice(j - 12, j + 13)
    checked = 0
    for i in range(offsets.size):
        if live[i, window].all():
            peak = j - 12 + int(np.argmax(corrected[i, window]))
            assert abs(peak - j) <= 1, (offsets[i], peak, j)
            checked += 1
    assert checked > offsets.size // 2
    # and 10 % too slow does not flatten it: the far live traces are off by more than a sample
    slow, live_s = nmo_correct(data, offsets, dt, 0.0, np.full(data.shape[1], 0.9 * v), stretch_limit=0.5, eta=etas)
    far = [i for i in range(offsets.size) if live_s[i, window].all()][-1]
    assert abs(j - 12 + int(np.argmax(slow[far, window])) - j) > 1


def test_stretch_mute_is_the_scans_rule():
    # velspec.scan.moveout: live while x^2/v^2 <= ((1+s)^2 - 1) t0^2, i.e. (t - t0)/t0 <= s
    # (Yilmaz, 2001: the stretch mute), and while the moveout time lies inside the trace
    rng = np.random.default_rng(3)
    offsets = np.arange(0.0, 3000.0, 37.5)
    ns, dt, s = 500, 0.004, 0.4
    data = rng.standard_normal((offsets.size, ns)).astype(np.float32)
    for v, t_first in ((1800.0, 0.0), (2600.0, -0.1)):
        _, live = nmo_correct(data, offsets, dt, t_first, np.full(ns, v), stretch_limit=s)
        t0 = t_first + dt * np.arange(ns)
        tau2 = np.where(t0 > 0, (t0 / dt) ** 2, -1.0).astype(np.float32)
        q_unit = (offsets**2 / dt**2).astype(np.float32)
        pos = np.zeros(ns, np.float32)
        for i in range(offsets.size):
            j0, j1 = positions(HYPERBOLIC, tau2, q_unit[i] * np.float32(1 / v**2), np.float32(0), mute_factor(s),
                               np.float32(t_first / dt), np.float32(ns - 1), pos)
            expect = np.zeros(ns, bool)
            expect[max(j0, 0): max(j1, 0)] = True
            assert np.array_equal(live[i].astype(bool), expect), (v, offsets[i])
        # the rule in float64 away from its edge: muted where the stretch exceeds s
        with np.errstate(divide="ignore", invalid="ignore"):
            t = np.sqrt(t0[None, :] ** 2 + (offsets[:, None] / v) ** 2)
            stretch = (t - t0[None, :]) / t0[None, :]
        end = t_first + dt * (ns - 1)
        inside = (t0[None, :] > 0) & (t <= end)
        clear = (np.abs(stretch - s) > 1e-4) & ((np.abs(t - end) > 1e-6) | (t == end))
        assert np.array_equal(live.astype(bool)[clear], ((stretch <= s) & inside)[clear])


def test_nmo_bits_do_not_depend_on_threads(monkeypatch):
    rng = np.random.default_rng(5)
    offsets = np.arange(100.0, 3000.0, 10.0)
    data = rng.standard_normal((offsets.size, 1000)).astype(np.float32)
    assert data.size >= velspec.nmo.PARALLEL_SAMPLES      # the parallel kernel
    v = np.linspace(1500.0, 3500.0, 1000)
    before = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = nmo_stack(data, offsets, 0.004, 0.0, v)
        numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
        many = nmo_stack(data, offsets, 0.004, 0.0, v)
    finally:
        numba.set_num_threads(before)
    monkeypatch.setattr(velspec.nmo, "PARALLEL_SAMPLES", data.size + 1)   # the one-thread kernel
    serial = nmo_stack(data, offsets, 0.004, 0.0, v)
    assert all(np.array_equal(a, b) and np.array_equal(a, c) for a, b, c in zip(one, many, serial))


def stack_snr(stack, truth, result, f=25.0):
    """Energy near the model's reflection times over the energy elsewhere, below 0.2 s."""
    near = np.zeros(stack.shape, bool)
    half = 1.0 / f
    for row, cmp in enumerate(result.cmp):
        b = int(np.flatnonzero(truth.cmp == cmp)[0])
        for tr in truth.t0[b]:
            near[row] |= np.abs(result.t0 - tr) <= half
    below = (result.t0 > 0.2)[None, :]
    e = stack.astype(np.float64) ** 2
    return e[near & below].mean() / e[~near & below].mean()


def test_stack_with_the_picked_field_beats_scaled_fields(made, tmp_path):
    # a stack is best with the right velocities: 10 % off either way smears the reflections
    # (common practice, no source)
    r = made["result"]
    snr = {}
    for scale in (1.0, 0.9, 1.1):
        out = tmp_path / f"s{scale}"
        export_result(r.replace(vrms=(r.vrms * np.float32(scale)).astype(np.float32)), out, line=made["line"])
        with segyio.open(out / "stack.sgy", ignore_geometry=True) as f:
            snr[scale] = stack_snr(f.trace.raw[:], made["truth"], r)
    assert snr[1.0] > snr[0.9] and snr[1.0] > snr[1.1], snr


def test_nmo_gathers_of_chosen_cmps(made, exported):
    r = made["result"]
    with velspec.export.open_matching_line(made["line"], r) as segy:
        want = [velspec.export.corrected_gather(segy, r, c) for c in (1003, 1006)]
    with segyio.open(exported / "nmo_gathers.sgy", ignore_geometry=True) as f:
        cdp = f.attributes(21)[:]
        assert f.tracecount == sum(g.data.shape[0] for g, _, _ in want)
        for c, (g, corrected, _) in zip((1003, 1006), want):
            sel = cdp == c
            assert np.array_equal(f.attributes(37)[:][sel], np.rint(g.offsets).astype(int))
            assert np.array_equal(f.trace.raw[:][sel], corrected)
        assert np.allclose(f.attributes(181)[:][cdp == 1003] / 100.0, r.cmp_x[r.row(1003)])


def test_force_replaces_a_folder_velspec_wrote(made, tmp_path, capsys):
    out = tmp_path / "p"
    assert run(["export", made["path"], "--out", out, "--quiet"], capsys)[0] == 0
    (out / "vrms.sgy").write_bytes(b"old")
    status, _, err = run(["export", made["path"], "--out", out, "--force", "--quiet", "--csv-step", "0.1"], capsys)
    assert status == 0, err
    with segyio.open(out / "vrms.sgy", ignore_geometry=True) as f:
        assert f.tracecount == made["result"].cmp.size
    assert "every 0.1 s" in (out / "functions.csv").read_text()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["p"]


# -- bad input: one line, exit 2, nothing half-written ---------------------------------------------

@pytest.fixture(scope="module")
def bad_inputs(made):
    root = made["root"] / "bad"
    root.mkdir()
    other_version = root / "v2.h5"
    shutil.copy(made["path"], other_version)
    with h5py.File(other_version, "r+") as h5:
        h5.attrs["format_version"] = 2
    other_cmps = root / "other_cmps.sgy"
    make_line(other_cmps, LineSpec(ncmp=8, first_cmp=2001, snr=6.0, nsamples=NSAMPLES, seed=2))
    other_axis = root / "other_axis.sgy"
    make_line(other_axis, LineSpec(ncmp=8, snr=6.0, nsamples=NSAMPLES - 100, seed=2))
    return {"version": other_version, "cmps": other_cmps, "axis": other_axis}


CASES = {
    "format version": (lambda m, b: [b["version"]], "format_version"),
    "line with other CMPs": (lambda m, b: [m["path"], "--line", b["cmps"]], "does not match"),
    "line with another time axis": (lambda m, b: [m["path"], "--line", b["axis"]], "time axis"),
    "cmp the result lacks": (lambda m, b: [m["path"], "--line", m["line"], "--cmp", "999"], "CMP 999"),
    "cmp without the line": (lambda m, b: [m["path"], "--cmp", "1003"], "--line"),
    "no such result": (lambda m, b: [m["root"] / "nothing.h5"], "no such file"),
}


# report shows the kept panels of chosen CMPs without the line, so --cmp alone is no error there
@pytest.mark.parametrize("command, case", [(c, k) for c in ("export", "report") for k in sorted(CASES)
                                           if not (c == "report" and k == "cmp without the line")])
def test_bad_input_is_one_error_line_and_leaves_nothing(made, bad_inputs, tmp_path, capsys, command, case):
    argv, word = CASES[case]
    out = tmp_path / "out"
    status, _, err = run([command, *argv(made, bad_inputs), "--out", out, "--quiet"], capsys)
    assert_user_error(status, err, word)
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("command", ["export", "report"])
def test_existing_output_needs_force_and_a_foreign_folder_is_never_replaced(made, tmp_path, capsys, command):
    out = tmp_path / "out"
    out.mkdir()
    (out / "mine.txt").write_text("keep me")
    status, _, err = run([command, made["path"], "--out", out, "--quiet"], capsys)
    assert_user_error(status, err, "exists", "--force")
    status, _, err = run([command, made["path"], "--out", out, "--quiet", "--force"], capsys)
    assert_user_error(status, err, "not written by velspec")
    assert [p.name for p in out.iterdir()] == ["mine.txt"] and (out / "mine.txt").read_text() == "keep me"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


def test_a_line_with_another_checksum_but_the_same_cmps_and_axis_is_stacked_with_a_warning(made, tmp_path, capsys):
    other = tmp_path / "reprocessed.sgy"
    make_line(other, LineSpec(ncmp=8, snr=3.0, nsamples=NSAMPLES, seed=9))   # same geometry, other noise
    status, _, err = run(["export", made["path"], "--out", tmp_path / "p", "--line", other, "--quiet"], capsys)
    assert status == 0
    assert [ln for ln in err.splitlines() if ln.startswith("velspec: warning:")] and "checksum" in err
    assert (tmp_path / "p" / "stack.sgy").is_file()


def test_a_failure_midway_leaves_no_folder(made, tmp_path, monkeypatch):
    def broken(*args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr(velspec.export, "write_contents", broken)
    with pytest.raises(OSError):
        export_result(made["path"], tmp_path / "p", line=made["line"])
    assert list(tmp_path.iterdir()) == []
