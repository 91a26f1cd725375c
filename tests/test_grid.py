"""3D-binned data: bins from the inline and crossline headers (SEG-Y rev 1, 2002, bytes 189 and
193, written and read back with segyio), analysis on every n-th bin or on a list, the result's
bin numbers and grid, and neighbours on the grid of which the 2D line is the special case."""

import json

import h5py
import numpy as np
import pytest
import segyio
from test_scale import assert_same_bits

import velspec
from velspec.errors import InputError
from velspec.neighbours import GridNeighbours, LineNeighbours
from velspec.streaming import run_to_file
from velspec.synth import LineSpec, make_line

NCMP, INLINES = 12, (20, 21, 22)


def write_binned(path, lines, inlines):
    """One SEG-Y file of several 2D lines, each trace's inline its line's number and its crossline
    its CDP number, set through segyio."""
    with open(path, "wb") as out:
        for k, line in enumerate(lines):
            data = line.read_bytes()
            out.write(data if k == 0 else data[3600:])   # one set of textual and binary headers
    counts = []
    for line in lines:
        with segyio.open(line, ignore_geometry=True) as f:
            counts.append(f.tracecount)
    with segyio.open(path, "r+", ignore_geometry=True) as f:
        cdp = f.attributes(segyio.TraceField.CDP)[:]
        il = np.repeat(inlines, counts)
        for i in range(f.tracecount):
            f.header[i].update({segyio.TraceField.INLINE_3D: int(il[i]), segyio.TraceField.CROSSLINE_3D: int(cdp[i])})


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    d = tmp_path_factory.mktemp("grid")
    lines = []
    for k, il in enumerate(INLINES):
        lines.append(d / f"il{il}.sgy")
        make_line(lines[-1], LineSpec(ncmp=NCMP, nsamples=500, snr=2.0, seed=10 + k))
    write_binned(d / "survey.sgy", lines, INLINES)
    return d / "survey.sgy", lines


def base(**grid):
    p = {"scan": {"nvel": 30}, "keep_spectra": 2, "read": {"geometry": "3d"}}
    if grid:
        p["grid"] = grid
    return p


def test_grid_neighbours_of_one_inline_are_the_line_neighbours():
    line, grid = LineNeighbours(9), GridNeighbours(np.zeros(9, int), np.arange(9))
    for r in range(4):
        for i in range(9):
            for a, b in zip(line.near(i, r), grid.near(i, r)):
                assert np.array_equal(a, b)
            assert (line.first(i, r), line.last(i, r)) == (grid.first(i, r), grid.last(i, r))


def test_grid_neighbours_are_the_bins_within_the_radius_in_both_directions(rng):
    # the stated rule, max(|d inline|, |d crossline|) <= r, by brute force over a grid with holes
    il, xl = np.divmod(np.arange(7 * 9), 9)
    keep = rng.random(il.size) < 0.7
    il, xl = il[keep], xl[keep]
    hood = GridNeighbours(il, xl)
    for r in (0, 1, 2):
        for i in range(il.size):
            d = np.maximum(np.abs(il - il[i]), np.abs(xl - xl[i]))
            j, dist = hood.near(i, r)
            assert np.array_equal(j, np.flatnonzero(d <= r)) and np.array_equal(dist, d[j])
            assert hood.first(i, r) <= j.min() and hood.last(i, r) >= j.max()


def test_every_other_crossline_is_analysed_and_the_bins_are_stored(survey, tmp_path):
    path, _ = survey
    out = tmp_path / "r.h5"
    run_to_file(path, out, base(crossline_step=2))
    with segyio.open(path, ignore_geometry=True) as f:
        pairs = sorted(set(zip(f.attributes(segyio.TraceField.INLINE_3D)[:],
                               f.attributes(segyio.TraceField.CROSSLINE_3D)[:])))
    first_xl = min(x for _, x in pairs)
    expected = [(i, x) for i, x in pairs if (x - first_xl) % 2 == 0]
    with h5py.File(out) as f:
        got = list(zip(f["inline"][()], f["crossline"][()]))
        assert got == expected and len(got) == len(INLINES) * NCMP // 2
        assert np.all(np.diff(f["cmp"][()]) > 0)
        assert json.loads(f.attrs["grid"])["shape"] == [len(INLINES), NCMP // 2]
        assert f["inline"].dims[0][0].name == "/cmp"
    # the in-memory run gives the same file
    velspec.write_result(tmp_path / "m.h5", velspec.run_line(path, base(crossline_step=2)))
    assert_same_bits(out, tmp_path / "m.h5")
    assert velspec.read_result(out).inline.tolist() == [i for i, _ in expected]


def test_a_list_of_bins_is_analysed_alone(survey, tmp_path):
    path, _ = survey
    bins = [[22, 1003], [20, 1001], [21, 1007]]
    with segyio.open(path, ignore_geometry=True) as f:
        have = set(zip(f.attributes(segyio.TraceField.INLINE_3D)[:], f.attributes(segyio.TraceField.CROSSLINE_3D)[:]))
    assert all(tuple(b) in have for b in bins)
    r = velspec.run_line(path, base(bins=bins))
    assert sorted(zip(r.inline.tolist(), r.crossline.tolist())) == sorted(map(tuple, bins))
    with pytest.raises(InputError, match="grid.bins"):
        velspec.run_line(path, base(bins=[[23, 1001]]))


def _without_cmp(path):
    # the same content but the CMP numbers, which a 3D bin numbers on its grid
    out = {}
    with h5py.File(path) as f:
        f.visititems(lambda n, o: out.__setitem__(n, o[()].tobytes()) if isinstance(o, h5py.Dataset)
                     and n not in ("cmp", "picks/cmp", "spectra/cmp", "inline", "crossline") else None)
    return out


def test_one_inline_on_the_grid_gives_the_bits_of_the_2d_line(survey, tmp_path):
    _, lines = survey
    one = tmp_path / "one.sgy"
    write_binned(one, lines[:1], INLINES[:1])
    p = {"scan": {"nvel": 30}, "keep_spectra": 2, "pick": {"lateral_cmps": 2, "outlier_tolerance": 0.005,
                                                          "outlier_sigmas": 0.0}}
    velspec.write_result(tmp_path / "2d.h5", velspec.run_line(lines[0], p))
    run_to_file(one, tmp_path / "3d.h5", dict(p, read={"geometry": "3d"}))
    assert _without_cmp(tmp_path / "2d.h5") == _without_cmp(tmp_path / "3d.h5")


def test_inlines_are_coupled_only_through_the_lateral_steps(survey, tmp_path):
    path, lines = survey
    # the sea floor is given: found in the data, it is made consistent along the analysis order
    alone = {"scan": {"nvel": 30}, "keep_spectra": 0,
             "pick": {"smooth_cmps": 0, "lateral_cmps": 0, "water_bottom": 0.2}}
    grid = velspec.run_line(path, dict(alone, read={"geometry": "3d"}))
    middle = grid.inline == INLINES[1]
    line = velspec.run_line(lines[1], alone)
    assert np.array_equal(grid.vrms[middle], line.vrms)          # no lateral step: inline on its own
    coupled = velspec.run_line(path, dict(alone, read={"geometry": "3d"}, pick={"water_bottom": 0.2}))
    assert not np.array_equal(coupled.vrms[coupled.inline == INLINES[1]], line.vrms)   # smoothing reaches across


def test_grid_parameters_need_3d_geometry():
    with pytest.raises(velspec.VelspecError, match="geometry"):
        velspec.RunParams.from_dict({"grid": {"inline_step": 2}}).validate()
