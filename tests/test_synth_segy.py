"""The synthetic line generator: SEG-Y layout, geometry, wavelet placement and noise level.

Byte positions are read straight from the file bytes as the standard lays them out (SEG Technical
Standards Committee, 2002, SEG Y rev 1 Data Exchange format: 3200-byte textual header, 400-byte
binary header, 240-byte big-endian trace headers) and compared with what segyio reads.
"""

import tracemalloc

import numpy as np
import pytest
import segyio

import velspec.synth.line as line_mod
from velspec.errors import ParameterError
from velspec.synth import LineSpec, make_line, ricker

TF = segyio.TraceField
SMALL = dict(ncmp=16, channels=24, nsamples=501, first_cmp=2001)
ONE_LAYER = (np.array([900.0]), np.array([2000.0, 2600.0]))


def raw_headers(path, nsamples, fmt_bytes=4):
    """Trace headers as a (ntraces, 240) byte array, parsed without segyio (SEG-Y rev 1)."""
    raw = np.fromfile(path, dtype=np.uint8)
    body = raw[3600:].reshape(-1, 240 + nsamples * fmt_bytes)
    return raw[:3600], body[:, :240]


def field(headers, byte, size=4):
    """Big-endian signed integer at 1-based byte position ``byte`` of every header."""
    dt = ">i4" if size == 4 else ">i2"
    return headers[:, byte - 1 : byte - 1 + size].copy().view(dt).ravel().astype(np.int64)


def bin_field(prefix, byte, size=2):
    dt = ">i4" if size == 4 else ">i2"
    return int(prefix[byte - 1 : byte - 1 + size].copy().view(dt)[0])


def read_traces(path):
    with segyio.open(path, ignore_geometry=True) as f:
        data = segyio.tools.collect(f.trace[:])
        heads = {k: f.attributes(k)[:] for k in (TF.FieldRecord, TF.TraceNumber, TF.CDP, TF.offset)}
    return data, heads


@pytest.fixture(scope="module")
def shot_line(tmp_path_factory):
    path = tmp_path_factory.mktemp("shot") / "line.sgy"
    spec = LineSpec(**SMALL, lateral=0.02)
    return path, spec, make_line(path, spec)


def test_trace_count_and_fold(shot_line):
    # fold = channels * group_interval / (2 * shot_interval) (common practice, no source)
    path, spec, truth = shot_line
    fold = spec.channels * spec.group_interval / (2 * spec.shot_interval)
    with segyio.open(path, ignore_geometry=True) as f:
        assert f.tracecount == spec.ncmp * fold == truth.ntraces
        cdp = f.attributes(TF.CDP)[:]
    numbers, counts = np.unique(cdp, return_counts=True)
    np.testing.assert_array_equal(numbers, spec.first_cmp + np.arange(spec.ncmp))
    assert np.all(counts == fold)


def test_standard_byte_positions(shot_line):
    # SEG-Y rev 1 (2002): binary header bytes 3217 interval (us), 3221 samples, 3225 format,
    # 3255 measurement system, 3501 revision; trace header bytes as in the module docstring
    path, spec, truth = shot_line
    prefix, h = raw_headers(path, spec.nsamples)
    assert bin_field(prefix, 3217) == 4000
    assert bin_field(prefix, 3221) == spec.nsamples
    assert bin_field(prefix, 3225) == 5
    assert bin_field(prefix, 3255) == 1
    assert bin_field(prefix, 3501) == 0x0100  # rev 1.0 as major byte 1, minor byte 0
    # textual header: 40 EBCDIC card images of 80 characters, C39 and C40 as rev 1 asks
    text = prefix[:3200].tobytes().decode("cp500")
    cards = [text[i : i + 80] for i in range(0, 3200, 80)]
    assert cards[0].startswith("C 1 SYNTHETIC")
    assert cards[38].startswith("C39 SEG Y REV1") and cards[39].startswith("C40 END TEXTUAL HEADER")

    n = h.shape[0]
    np.testing.assert_array_equal(field(h, 1), np.arange(1, n + 1))
    assert np.all(field(h, 71, 2) == -100)
    assert np.all(field(h, 115, 2) == spec.nsamples)
    assert np.all(field(h, 117, 2) == 4000)
    assert np.all(field(h, 109, 2) == 0)
    with segyio.open(path, ignore_geometry=True) as f:  # segyio, the reference reader, agrees
        for byte, key, size in [(9, TF.FieldRecord, 4), (13, TF.TraceNumber, 4), (21, TF.CDP, 4),
                                (37, TF.offset, 4), (73, TF.SourceX, 4), (81, TF.GroupX, 4),
                                (181, TF.CDP_X, 4), (185, TF.CDP_Y, 4)]:
            np.testing.assert_array_equal(field(h, byte, size), f.attributes(key)[:])
        assert f.bin[segyio.BinField.Interval] == 4000
        np.testing.assert_allclose(f.samples, np.arange(spec.nsamples) * 4.0)


def test_geometry_headers_are_consistent(shot_line):
    # end-on geometry: offset = group x - source x, CDP x = midpoint, bins of group_interval/2,
    # coordinates in centimetres under scalar -100 (SEG-Y rev 1: a negative scalar divides)
    path, spec, truth = shot_line
    _, h = raw_headers(path, spec.nsamples)
    sx, gx, cx = field(h, 73) / 100.0, field(h, 81) / 100.0, field(h, 181) / 100.0
    off, cdp = field(h, 37), field(h, 21)
    np.testing.assert_allclose(gx - sx, off, atol=0.011)
    np.testing.assert_allclose(0.5 * (sx + gx), cx, atol=0.011)
    np.testing.assert_array_equal(
        cdp, spec.first_cmp + np.round((cx - spec.first_cmp_x) / (spec.group_interval / 2))
    )
    assert np.all(field(h, 77) == field(h, 85))  # a straight line of constant y
    assert off.min() >= spec.near_offset
    assert off.max() <= spec.near_offset + (spec.channels - 1) * spec.group_interval
    assert np.all(np.isin(off - spec.near_offset, np.arange(spec.channels) * spec.group_interval))
    # channel number 1 is the near trace
    np.testing.assert_array_equal(off, spec.near_offset + (field(h, 13) - 1) * spec.group_interval)
    # the truth lists the same offsets per CMP as the file
    for b, c in enumerate(truth.cmp):
        got = np.sort(off[cdp == c]).astype(float)
        want = truth.offsets[b][np.isfinite(truth.offsets[b])]
        np.testing.assert_array_equal(got, want)


def test_shot_order(shot_line):
    # shot order as recorded: field records in sequence, channels in order within each (common
    # practice, no source); binary sorting code 1 = as recorded (SEG-Y rev 1, byte 3229)
    path, spec, _ = shot_line
    prefix, _ = raw_headers(path, spec.nsamples)
    assert bin_field(prefix, 3229) == 1
    _, heads = read_traces(path)
    fr, cdp = heads[TF.FieldRecord], heads[TF.CDP]
    assert np.all(np.diff(fr) >= 0)
    assert np.any(np.diff(cdp) < 0)  # shot order is not CMP order
    # within a shot, channel numbers increase
    same = np.diff(fr) == 0
    assert np.all(np.diff(heads[TF.TraceNumber])[same] > 0)


def test_cmp_order_holds_the_same_traces(shot_line, tmp_path):
    path, spec, _ = shot_line
    cpath = tmp_path / "cmp.sgy"
    make_line(cpath, LineSpec(**SMALL, lateral=0.02, trace_order="cmp"))
    a, ha = read_traces(path)
    b, hb = read_traces(cpath)
    # CMP order: CDP ensembles (sorting code 2, SEG-Y rev 1 byte 3229), offsets increasing
    prefix, _ = raw_headers(cpath, spec.nsamples)
    assert bin_field(prefix, 3229) == 2
    assert np.all(np.diff(hb[TF.CDP]) >= 0)
    same = np.diff(hb[TF.CDP]) == 0
    assert np.all(np.diff(hb[TF.offset])[same] > 0)
    ka = np.lexsort((ha[TF.TraceNumber], ha[TF.FieldRecord]))
    kb = np.lexsort((hb[TF.TraceNumber], hb[TF.FieldRecord]))
    for key in ha:
        np.testing.assert_array_equal(ha[key][ka], hb[key][kb])
    np.testing.assert_array_equal(a[ka], b[kb])  # noise seeded per (shot, channel), not per batch


def test_ibm_float_round_trip(tmp_path):
    # IBM hexadecimal float (SEG-Y rev 1 format code 1): sign, 7-bit base-16 exponent biased by 64,
    # 24-bit fraction; decoded here by hand, and within 2^-20 relative of the IEEE values
    base = dict(SMALL, ncmp=4, snr=5.0)
    make_line(tmp_path / "ieee.sgy", LineSpec(**base, sample_format=5))
    make_line(tmp_path / "ibm.sgy", LineSpec(**base, sample_format=1))
    ieee, _ = read_traces(tmp_path / "ieee.sgy")
    ibm, _ = read_traces(tmp_path / "ibm.sgy")
    prefix, _ = raw_headers(tmp_path / "ibm.sgy", base["nsamples"])
    assert bin_field(prefix, 3225) == 1
    np.testing.assert_allclose(ibm, ieee, rtol=2.0**-20, atol=1e-30)
    assert np.abs(ieee).max() > 0
    raw = np.fromfile(tmp_path / "ibm.sgy", dtype=np.uint8)[3600:]
    words = raw.reshape(ibm.shape[0], -1)[:, 240:].copy().view(">u4").astype(np.int64)
    sign = np.where(words >> 31, -1.0, 1.0)
    expo = (words >> 24) & 0x7F
    frac = (words & 0xFFFFFF) / 16.0**6
    decoded = sign * frac * 16.0 ** (expo - 64)
    np.testing.assert_array_equal(decoded.astype(np.float32), ibm)


def test_feet_option(tmp_path):
    # measurement system 2 = feet (SEG-Y rev 1, byte 3255); 1 ft = 0.3048 m exactly
    spec = LineSpec(**SMALL, feet=True)
    path = tmp_path / "ft.sgy"
    truth = make_line(path, spec)
    prefix, h = raw_headers(path, spec.nsamples)
    assert bin_field(prefix, 3255) == 2
    chan = field(h, 13) - 1
    off_m = spec.near_offset + chan * spec.group_interval
    np.testing.assert_array_equal(field(h, 37), np.round(off_m / 0.3048))
    sx, gx = field(h, 73) / 100.0, field(h, 81) / 100.0
    np.testing.assert_allclose((gx - sx) * 0.3048, off_m, atol=0.01)
    cx = field(h, 181) / 100.0 * 0.3048
    b = field(h, 21) - spec.first_cmp
    np.testing.assert_allclose(cx, truth.cmp_x[b], atol=0.01)


def test_cdp_header_off_leaves_coordinates_to_bin_from(tmp_path, shot_line):
    # without CDP headers, binning the source-group midpoint in group_interval/2 bins (common
    # practice, no source) must give back the CMP numbers of the file that has them
    path, spec, _ = shot_line
    p2 = tmp_path / "nocdp.sgy"
    make_line(p2, LineSpec(**SMALL, lateral=0.02, cdp_header=False))
    _, h2 = raw_headers(p2, spec.nsamples)
    _, h1 = raw_headers(path, spec.nsamples)
    for byte in (21, 181, 185):
        assert np.all(field(h2, byte) == 0)
    mid = (field(h2, 73) + field(h2, 81)) / 200.0
    binned = spec.first_cmp + np.round((mid - spec.first_cmp_x) / (spec.group_interval / 2))
    np.testing.assert_array_equal(binned, field(h1, 21))


def peak_times(data, dt, delay):
    """Time of the largest sample of each trace, refined by a parabola through three samples."""
    i = np.argmax(data, axis=1)
    rows = np.arange(data.shape[0])
    ym, y0, yp = data[rows, i - 1], data[rows, i], data[rows, i + 1]
    frac = 0.5 * (ym - yp) / (ym - 2 * y0 + yp)
    return delay + (i + frac) * dt


@pytest.mark.parametrize("delay", [0.0, 0.1])
def test_isolated_event_sits_at_the_exact_time(tmp_path, delay):
    # one layer: t = sqrt(t0^2 + x^2/v^2) exactly (Yilmaz, 2001, Seismic Data Analysis); the
    # zero-phase Ricker (Ricker, 1953, Geophysics 18) peaks there with amplitude R =
    # (Z2 - Z1)/(Z2 + Z1), Z = 310 v^1.25 (Gardner et al., 1974, Geophysics 39)
    spec = LineSpec(**SMALL, model=ONE_LAYER, delay=delay)
    path = tmp_path / "one.sgy"
    make_line(path, spec)
    data, heads = read_traces(path)
    _, h = raw_headers(path, spec.nsamples)
    assert np.all(field(h, 109, 2) == round(delay * 1000))
    with segyio.open(path, ignore_geometry=True) as f:
        np.testing.assert_allclose(f.samples, delay * 1e3 + np.arange(spec.nsamples) * 4.0)
    x = heads[TF.offset].astype(float)
    h1, v = ONE_LAYER
    t = np.sqrt((2 * h1[0] / v[0]) ** 2 + x**2 / v[0] ** 2)
    got = peak_times(data, spec.dt, delay)
    assert np.max(np.abs(got - t)) < 0.05 * spec.dt
    r = (v[1] / v[0]) ** 1.25
    R = (r - 1) / (r + 1)
    times = delay + np.arange(spec.nsamples) * spec.dt
    want = R * ricker(times[None, :] - t[:, None], spec.peak_frequency)
    np.testing.assert_allclose(data, want, rtol=0, atol=1e-6)


def test_lateral_models_drive_each_cmp(tmp_path):
    # each CMP's traces follow its own one-layer model: t = sqrt(t0^2 + x^2/v^2) (Yilmaz, 2001)
    spec = LineSpec(**SMALL, model=ONE_LAYER, lateral=0.05, trace_order="cmp")
    path = tmp_path / "lat.sgy"
    truth = make_line(path, spec)
    ratio = truth.velocity / ONE_LAYER[1]
    assert np.all(np.abs(ratio - 1) <= 0.05 + 1e-12) and np.ptp(ratio[:, 0]) > 0.005
    data, heads = read_traces(path)
    b = heads[TF.CDP] - spec.first_cmp
    x = heads[TF.offset].astype(float)
    h, v = truth.thickness[b, 0], truth.velocity[b, 0]
    t = np.sqrt((2 * h / v) ** 2 + x**2 / v**2)
    assert np.max(np.abs(peak_times(data, spec.dt, 0.0) - t)) < 0.1 * spec.dt


def test_signal_to_noise_ratio_as_defined(tmp_path):
    # S/N as LineSpec documents it: RMS of the noise-free line over all samples / RMS of the noise
    base = dict(SMALL, seed=4)
    make_line(tmp_path / "clean.sgy", LineSpec(**base))
    make_line(tmp_path / "noisy.sgy", LineSpec(**base, snr=3.0))
    clean, _ = read_traces(tmp_path / "clean.sgy")
    noisy, _ = read_traces(tmp_path / "noisy.sgy")
    noise = noisy.astype(np.float64) - clean
    ratio = np.sqrt(np.mean(clean.astype(np.float64) ** 2)) / np.sqrt(np.mean(noise**2))
    assert ratio == pytest.approx(3.0, rel=0.1)
    # band-limited like the Ricker: its power spectrum f^4 exp(-2 f^2/fp^2) holds ~99.9% of the
    # power below 2.5 fp (Ricker, 1953), where white noise would hold 2.5 fp / Nyquist = 50%
    spec = np.abs(np.fft.rfft(noise, axis=1)) ** 2
    f = np.fft.rfftfreq(noise.shape[1], 0.004)
    assert spec[:, f < 62.5].sum() / spec.sum() > 0.99
    # noise independent from trace to trace (correlation of neighbours near zero)
    c = np.corrcoef(noise[:-1].ravel(), noise[1:].ravel())[0, 1]
    assert abs(c) < 0.05


def test_multiples_at_twice_the_time_with_minus_r_squared(tmp_path):
    # first-order free-surface multiple of one layer: the primary of a layer twice as thick (exact
    # geometry), amplitude R * (-1) * R (free-surface reflection coefficient -1)
    spec = LineSpec(**dict(SMALL, nsamples=1001), model=ONE_LAYER, multiples=True)
    path = tmp_path / "mult.sgy"
    make_line(path, spec)
    data, heads = read_traces(path)
    h, v = ONE_LAYER
    x = heads[TF.offset].astype(float)
    r = (v[1] / v[0]) ** 1.25
    R = (r - 1) / (r + 1)
    times = np.arange(spec.nsamples) * spec.dt
    t1 = np.sqrt((2 * h[0] / v[0]) ** 2 + (x / v[0]) ** 2)
    t2 = np.sqrt((4 * h[0] / v[0]) ** 2 + (x / v[0]) ** 2)
    want = R * ricker(times - t1[:, None], 25.0) - R**2 * ricker(times - t2[:, None], 25.0)
    np.testing.assert_allclose(data, want, rtol=0, atol=1e-6)


def test_events_beyond_the_record_leave_noise_only(tmp_path):
    # one layer, t = sqrt(t0^2 + x^2/v^2) (Yilmaz, 2001): traces whose event falls after the last
    # sample hold noise alone (the first shots written carry only far channels)
    spec = LineSpec(**dict(SMALL, nsamples=215), model=ONE_LAYER, snr=5.0)
    path = tmp_path / "short.sgy"
    make_line(path, spec)
    data, heads = read_traces(path)
    x = heads[TF.offset].astype(float)
    t = np.sqrt(0.9**2 + x**2 / 2000.0**2)
    late = t > (spec.nsamples - 1) * spec.dt + 1.5 / spec.peak_frequency
    assert late.any() and (~late).any()
    noise = np.sqrt(np.mean(data[late].astype(float) ** 2))
    quiet = np.sqrt(np.mean(data[~late, :150].astype(float) ** 2))  # well above every event
    assert noise == pytest.approx(quiet, rel=0.15)


def test_memory_stays_flat_with_line_length(tmp_path):
    # streaming writer: peak Python memory must not grow with the number of CMPs (both lines are
    # longer than a shot's spread, so every shot batch has the full 48 channels)
    peaks = []
    for ncmp in (60, 240):
        tracemalloc.start()
        spec = LineSpec(ncmp=ncmp, channels=48, nsamples=501, snr=4.0)
        make_line(tmp_path / f"m{ncmp}.sgy", spec)
        peaks.append(tracemalloc.get_traced_memory()[1])
        tracemalloc.stop()
    data_bytes = 240 * 24 * 501 * 4
    assert peaks[1] < 1.3 * peaks[0]
    assert peaks[1] < data_bytes / 4


def test_impossible_spec_writes_nothing(tmp_path):
    # SEG-Y stores the sample interval as whole microseconds (rev 1, byte 3217), so 4.1234 ms
    # cannot be written
    with pytest.raises(ParameterError, match="trace_order"):
        make_line(tmp_path / "bad.sgy", LineSpec(trace_order="random"))
    with pytest.raises(ParameterError, match="dt"):
        make_line(tmp_path / "bad.sgy", LineSpec(dt=0.0041234))
    assert list(tmp_path.iterdir()) == []


def test_failure_mid_write_leaves_no_file(tmp_path, monkeypatch):
    calls = {"n": 0}
    real = line_mod._Synth.signal

    def failing(self, chan, bins):
        calls["n"] += 1
        if calls["n"] > 3:
            raise RuntimeError("disk on fire")
        return real(self, chan, bins)

    monkeypatch.setattr(line_mod._Synth, "signal", failing)
    with pytest.raises(RuntimeError):
        make_line(tmp_path / "half.sgy", LineSpec(**SMALL))
    assert list(tmp_path.iterdir()) == []
