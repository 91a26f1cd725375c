"""SEG-Y reading against segyio (reference library) and the byte positions of SEG-Y rev 1 (2002)
and rev 2.0 (2017)."""

import shutil

import numpy as np
import pytest
import segyio

from velspec.errors import InputError
from velspec.io.segy import ibm_to_float32, open_line
from velspec.params import HeaderBytes, ReadParams
from velspec.synth import LineSpec, make_line


@pytest.fixture(scope="module")
def ieee(tmp_path_factory):
    path = tmp_path_factory.mktemp("segy") / "ieee.sgy"
    make_line(path, LineSpec(ncmp=6, snr=5.0, nsamples=300, seed=4))
    return path


def segyio_gather(path, cmp):
    """The CMP's traces as segyio reads them, sorted by |offset| then trace number."""
    with segyio.open(path, ignore_geometry=True) as f:
        cdp = f.attributes(segyio.TraceField.CDP)[:]
        off = np.abs(f.attributes(segyio.TraceField.offset)[:])
        idx = np.flatnonzero(cdp == cmp)
        idx = idx[np.lexsort((idx, off[idx]))]
        return np.stack([f.trace[int(i)] for i in idx]), off[idx]


def test_gathers_match_segyio(ieee):
    with open_line(ieee) as line:
        assert line.ntraces == 6 * 48 and line.nsamples == 300 and line.dt == pytest.approx(0.004)
        for k in range(line.ncmp):
            g = line.read_gather(k)
            data, off = segyio_gather(ieee, g.cmp)
            assert np.array_equal(g.data, data) and np.array_equal(g.offsets, off.astype(np.float32))


def test_ibm_floats_read_like_ieee(tmp_path, ieee):
    # IBM System/360 floats (SEG-Y format code 1) carry 24-bit mantissas: agreement to ~1e-6 relative.
    ibm = tmp_path / "ibm.sgy"
    make_line(ibm, LineSpec(ncmp=6, snr=5.0, nsamples=300, seed=4, sample_format=1))
    with open_line(ibm) as a, open_line(ieee) as b:
        assert a.sample_format == 1
        ga, gb = a.read_gather(2), b.read_gather(2)
        scale = np.abs(gb.data).max()
        assert np.max(np.abs(ga.data - gb.data)) < 1e-6 * scale


def test_ibm_conversion_against_segyio():
    # segyio.tools.native decodes big-endian IBM words (format 1) to native floats: the reference.
    rng = np.random.default_rng(0)
    values = (rng.standard_normal(1000) * 10.0 ** rng.integers(-5, 6, 1000)).astype(np.float32)
    ibm_words = _to_ibm(values)
    ref = segyio.tools.native(ibm_words.byteswap().view(np.float32), format=1)
    assert np.array_equal(ibm_to_float32(ibm_words), ref)
    assert np.allclose(ref, values, rtol=1e-6)   # and the encoder in this test is right


def _to_ibm(x):
    """Encode float32 as IBM floats (SEG-Y rev 1 format 1), independently of the reader."""
    x = x.astype(np.float64)
    sign = (x < 0).astype(np.uint32) << 31
    a = np.abs(x)
    out = np.zeros(x.shape, dtype=np.uint32)
    nz = a > 0
    e = np.floor(np.log(a[nz]) / np.log(16.0)).astype(np.int64) + 1
    m = a[nz] / 16.0 ** e
    fix = m >= 1.0
    e[fix] += 1
    m[fix] /= 16.0
    mant = np.round(m * (1 << 24)).astype(np.uint64)
    over = mant >= (1 << 24)
    mant[over] >>= 4
    e[over] += 1
    out[nz] = ((e + 64).astype(np.uint32) << 24) | mant.astype(np.uint32)
    return out | sign


def test_feet_are_converted_to_metres(tmp_path, ieee):
    # Binary header measurement system 2 = feet (SEG-Y rev 1, bytes 3255-3256); 1 ft = 0.3048 m.
    ft = tmp_path / "ft.sgy"
    make_line(ft, LineSpec(ncmp=6, snr=5.0, nsamples=300, seed=4, feet=True))
    with open_line(ft) as a, open_line(ieee) as b:
        assert a.feet
        assert np.allclose(a.read_gather(1).offsets, b.read_gather(1).offsets, atol=0.2)
        assert np.allclose(a.index.cmp_x, b.index.cmp_x, atol=0.2)


def test_offsets_from_coordinates_when_header_is_zero(tmp_path, ieee):
    zero = tmp_path / "nooff.sgy"
    shutil.copy(ieee, zero)
    with segyio.open(zero, "r+", ignore_geometry=True) as f:
        for i in range(f.tracecount):
            f.header[i][segyio.TraceField.offset] = 0
    with open_line(zero) as a, open_line(ieee) as b:
        assert a.index.offset_source == "coordinates"
        # |group - source| with the coordinate scalar -100 (SEG-Y rev 1 byte 71: divide by 100).
        assert np.allclose(a.index.offset, b.index.offset, atol=0.01)


def test_cmp_binned_from_midpoints_when_cdp_is_zero(tmp_path, ieee):
    nocdp = tmp_path / "nocdp.sgy"
    make_line(nocdp, LineSpec(ncmp=6, snr=5.0, nsamples=300, seed=4, cdp_header=False))
    with pytest.warns(UserWarning, match="binned"):
        a = open_line(nocdp)
    with a, open_line(ieee) as b:
        assert a.index.binned and a.ncmp == b.ncmp
        assert np.array_equal(a.index.fold, b.index.fold)
        assert np.allclose(a.index.cmp_x, b.index.cmp_x)


def test_delay_recording_time_sets_time_zero(tmp_path):
    # Delay recording time, trace bytes 109-110 in ms (SEG-Y rev 1).
    path = tmp_path / "delay.sgy"
    make_line(path, LineSpec(ncmp=2, nsamples=200, delay=0.1))
    with open_line(path) as line:
        assert line.t_first == pytest.approx(0.1) and line.times[0] == pytest.approx(0.1)


def test_sample_interval_disagreement_is_an_error(tmp_path, ieee):
    bad = tmp_path / "dt.sgy"
    shutil.copy(ieee, bad)
    with segyio.open(bad, "r+", ignore_geometry=True) as f:
        f.bin.update({segyio.BinField.Interval: 2000})   # trace headers still say 4000 us
    with pytest.raises(InputError, match="sample interval"):
        open_line(bad)


def test_header_bytes_can_be_moved(tmp_path, ieee):
    # CMP numbers copied to the rev 1 ensemble-number slot... here the inline byte (189), and read from there.
    moved = tmp_path / "moved.sgy"
    shutil.copy(ieee, moved)
    with segyio.open(moved, "r+", ignore_geometry=True) as f:
        cdp = f.attributes(segyio.TraceField.CDP)[:]
        for i in range(f.tracecount):
            f.header[i].update({segyio.TraceField.INLINE_3D: int(cdp[i]) + 5000, segyio.TraceField.CDP: 0})
    params = ReadParams(headers=HeaderBytes(cdp=189))
    with open_line(moved, params) as line:
        assert line.index.cmp.min() == cdp.min() + 5000 and line.ncmp == 6


def rewrite_with_segyio(src_path, dst_path, endian="big", ext_headers=0):
    """Copy a line through segyio.create, in the given byte order and with extended headers."""
    with segyio.open(src_path, ignore_geometry=True) as src:
        spec = segyio.spec()
        spec.format = 5
        spec.samples = src.samples
        spec.tracecount = src.tracecount
        spec.endian = endian
        spec.ext_headers = ext_headers
        with segyio.create(dst_path, spec) as dst:
            dst.bin = src.bin
            dst.bin.update({segyio.BinField.Format: 5, segyio.BinField.ExtendedHeaders: ext_headers})
            for k in range(ext_headers):
                dst.text[k + 1] = segyio.tools.create_text_header({1: "extended textual header written by a test"})
            for i in range(src.tracecount):
                dst.header[i] = src.header[i]
                dst.trace[i] = src.trace[i]


def test_little_endian_rev2_file(tmp_path, ieee):
    # SEG-Y rev 2.0 allows little-endian files; segyio writes one and velspec must read it the same.
    little = tmp_path / "little.sgy"
    rewrite_with_segyio(ieee, little, endian="little")
    with open_line(little) as a, open_line(ieee) as b:
        assert a.endian == "little"
        assert np.array_equal(a.read_gather(3).data, b.read_gather(3).data)


def test_extended_textual_headers_are_skipped(tmp_path, ieee):
    # SEG-Y rev 1: binary-header bytes 3505-3506 count the 3200-byte extended textual headers
    # that follow the binary header; segyio writes one here and reads it back as the reference.
    ext = tmp_path / "ext.sgy"
    rewrite_with_segyio(ieee, ext, ext_headers=1)
    assert ext.stat().st_size == ieee.stat().st_size + 3200
    with open_line(ext) as a, open_line(ieee) as b:
        assert a.data_offset == 3600 + 3200 and a.ntraces == b.ntraces
        assert np.array_equal(a.read_gather(2).data, b.read_gather(2).data)
        assert np.array_equal(a.index.cmp, b.index.cmp)


def test_more_than_32767_samples(tmp_path):
    # Sample count and interval are unsigned 16-bit fields (SEG-Y rev 2.0, binary bytes 3221 and
    # 3217, trace bytes 115 and 117): 40000 samples at 0.25 ms must not read as negative.
    path = tmp_path / "long.sgy"
    spec = segyio.spec()
    spec.format = 5
    spec.samples = np.arange(40000) * 0.25
    spec.tracecount = 4
    with segyio.create(path, spec) as f:
        f.bin.update({segyio.BinField.Interval: 250, segyio.BinField.Samples: 40000})
        for i in range(4):
            f.header[i] = {segyio.TraceField.CDP: 7, segyio.TraceField.offset: 100 * (i + 1),
                           segyio.TraceField.TRACE_SAMPLE_COUNT: 40000, segyio.TraceField.TRACE_SAMPLE_INTERVAL: 250}
            f.trace[i] = np.full(40000, i + 1, dtype=np.float32)
    with open_line(path) as line:
        assert line.nsamples == 40000 and line.dt == pytest.approx(0.00025)
        g = line.read_gather(0)
        assert np.array_equal(g.data[:, -1], [1, 2, 3, 4]) and list(g.offsets) == [100, 200, 300, 400]


@pytest.mark.parametrize("fmt, dtype", [(2, np.int32), (3, np.int16), (8, np.int8)])
def test_integer_sample_formats(tmp_path, fmt, dtype):
    # SEG-Y rev 1 format codes 2 (4-byte integer), 3 (2-byte integer) and 8 (1-byte integer),
    # written and read back by segyio as the reference.
    path = tmp_path / f"int{fmt}.sgy"
    spec = segyio.spec()
    spec.format = fmt
    spec.samples = np.arange(50) * 4.0
    spec.tracecount = 3
    values = (np.arange(3 * 50).reshape(3, 50) % 100 - 50).astype(dtype)
    with segyio.create(path, spec) as f:
        f.bin.update({segyio.BinField.Interval: 4000})
        for i in range(3):
            f.header[i] = {segyio.TraceField.CDP: 1, segyio.TraceField.offset: 100 * (i + 1),
                           segyio.TraceField.TRACE_SAMPLE_INTERVAL: 4000}
            f.trace[i] = values[i]
    with segyio.open(path, ignore_geometry=True) as f:
        ref = np.stack([f.trace[i] for i in range(3)]).astype(np.float32)
    with open_line(path) as line:
        assert line.sample_format == fmt
        assert np.array_equal(line.read_gather(0).data, ref)
