"""Configuration round trips: ``run --print-config`` and ``velspec config`` write TOML that
Python's ``tomllib`` (the reference reader, TOML v1.0.0) reads back to the same parameters, and
a run repeated from a result's configuration gives the same bits."""

import dataclasses
import math
import tomllib

import numpy as np
import pytest
from clitools import assert_user_error, run
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import velspec
from velspec.config import to_toml
from velspec.params import PickParams, RunParams, ScanParams, load_toml
from velspec.synth import LineSpec, make_line


def _round_trip(params, tmp_path, name="p.toml"):
    path = tmp_path / name
    path.write_text(to_toml(params), encoding="utf-8")
    return load_toml(path)


def test_defaults_round_trip(tmp_path):
    assert _round_trip(RunParams(), tmp_path) == RunParams()


def test_every_kind_of_value_round_trips(tmp_path):
    params = RunParams(
        threads=2, block=7, keep_spectra=0,
        scan=ScanParams(vmin=1234.5, vmax=6e3, nvel=77, window=1e-5, moveout="nonhyperbolic", eta_max=0.1),
        pick=PickParams(bounds=((0.2, 1500.0, 2500.0), (1.5, 2000.0, 4000.0)),
                        guide='C:\\lines\\"guide" é\t.csv', water_bottom=0.1 + 0.2, smoothness=0.0))
    back = _round_trip(params, tmp_path)
    assert back == params
    assert back.pick.water_bottom == 0.1 + 0.2   # the shortest repr reads back the same float
    # tomllib, the reference reader, sees the sections of the README's layout
    data = tomllib.loads(to_toml(params))
    assert set(data) == {"threads", "block", "keep_spectra", "read", "condition", "scan", "pick", "interval", "grid"}
    assert data["read"]["headers"]["cdp"] == 21 and data["pick"]["bounds"][1] == [1.5, 2000.0, 4000.0]


def test_an_integer_given_for_a_float_is_written_as_a_float(tmp_path):
    params = RunParams(scan=ScanParams(vmin=1500))
    text = to_toml(params)
    assert "vmin = 1500.0" in text
    assert _round_trip(params, tmp_path) == params


_text = st.text(st.characters(exclude_categories=("Cs",)), max_size=30)
_float = st.floats(allow_nan=False, allow_infinity=False, width=64)


@settings(max_examples=120, derandomize=True, database=None, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(guide=_text, edits=_text, vmin=_float, smooth=_float, water=_float,
       bounds=st.lists(st.tuples(_float, _float, _float), max_size=3), threads=st.integers(0, 2**40),
       window=st.floats(allow_nan=True, allow_infinity=True))
def test_any_values_round_trip(tmp_path, guide, edits, vmin, smooth, water, bounds, threads, window):
    # the writer's output is read by tomllib (TOML v1.0.0) to the same values, valid or not
    params = RunParams(threads=threads,
                       scan=ScanParams(vmin=vmin, window=window),
                       pick=PickParams(guide=guide, edits=edits, smoothness=smooth, water_bottom=water,
                                       bounds=tuple(bounds)))
    back = RunParams.from_dict(tomllib.loads(to_toml(params)))
    if math.isnan(window):
        assert math.isnan(back.scan.window)
        back = dataclasses.replace(back, scan=dataclasses.replace(back.scan, window=window))
        params = dataclasses.replace(params, scan=dataclasses.replace(params.scan, window=window))
    assert back == params


def test_print_config_merges_file_and_options_and_reads_back(tmp_path, capsys):
    config = tmp_path / "in.toml"
    config.write_text("block = 4\n[scan]\nvmax = 5000\nnvel = 90\n[pick]\nbounds = [[0.5, 1500, 3000]]\n")
    status, out, err = run(["run", "--config", config, "--nvel", "150", "--guide", "regional",
                            "--threads", "1", "--print-config"], capsys)
    assert status == 0 and err == ""
    printed = tmp_path / "printed.toml"
    printed.write_text(out)
    back = load_toml(printed)
    expect = RunParams(block=4, threads=1, scan=ScanParams(vmax=5000.0, nvel=150),
                       pick=PickParams(bounds=((0.5, 1500.0, 3000.0),), guide="regional"))
    assert back == expect
    assert out.startswith("# velspec") and "qualified people" in out
    # fed back with --config it prints the same again
    status, again, _ = run(["run", "--config", printed, "--print-config"], capsys)
    assert status == 0 and again == out


def test_print_config_still_checks_the_parameters(tmp_path, capsys):
    status, out, err = run(["run", "--vmin", "7000", "--print-config"], capsys)
    assert_user_error(status, err, "vmin", "below vmax")
    assert out == ""
    status, _, err = run(["run", "--out", tmp_path / "r.h5"], capsys)
    assert_user_error(status, err, "required", "LINE.sgy")


@pytest.mark.parametrize("text,words", [
    ("[scan]\nvmn = 1500\n", ("[scan]", "'vmn'", "did you mean 'vmin'")),
    ("[pick]\nlateral_cmp = 3\n", ("'lateral_cmp'", "did you mean 'lateral_cmps'")),
    ("nvel = 100\n", ("'nvel'", "belongs in [scan]")),
    ("[scna]\nnvel = 100\n", ("'scna'", "did you mean 'scan'")),
    ("[read.headers]\ncpd = 21\n", ("[read.headers]", "did you mean 'cdp'")),
    ("[interval]\nxyzzy = 1\n", ("'xyzzy'", "known: cmp_spacing, dz,", "vint_max, vint_min)")),
])
def test_unknown_key_is_one_error_line_with_the_nearest_key(tmp_path, capsys, text, words):
    # difflib.get_close_matches (standard library) finds the nearest key
    config = tmp_path / "c.toml"
    config.write_text(text)
    status, out, err = run(["run", "--config", config, "--print-config"], capsys)
    assert_user_error(status, err, str(config), *words)
    assert out == ""


@pytest.fixture(scope="module")
def line(tmp_path_factory):
    path = tmp_path_factory.mktemp("cfgline") / "line.sgy"
    make_line(path, LineSpec(ncmp=6, snr=4.0, nsamples=400, seed=9))
    return path


def test_a_result_config_reproduces_the_result(line, tmp_path, capsys):
    first = tmp_path / "first.h5"
    status, _, err = run(["run", line, "--out", first, "--quiet", "--nvel", "70", "--vmax", "5500",
                          "--guide", "regional", "--threads", "1"], capsys)
    assert status == 0, err
    cfg = tmp_path / "first.toml"
    status, out, err = run(["config", first, "--out", cfg], capsys)
    assert status == 0 and out == "" and err == ""
    status, printed, _ = run(["config", first], capsys)
    assert status == 0 and tomllib.loads(printed) == tomllib.loads(cfg.read_text())
    assert load_toml(cfg) == velspec.read_result(first).params
    second = tmp_path / "second.h5"
    status, _, err = run(["run", line, "--out", second, "--quiet", "--config", cfg], capsys)
    assert status == 0, err
    a, b = velspec.read_result(first), velspec.read_result(second)
    report = velspec.compare_results(second, first, params=velspec.CompareParams.exact())
    assert report.passed and report.parameters == [], report.summary()
    for name in ("vrms", "vint", "vint_sigma"):
        assert np.array_equal(getattr(a, name), getattr(b, name), equal_nan=True)
    for column in a.picks.dtype.names:
        assert np.array_equal(a.picks[column], b.picks[column], equal_nan=True)
    status, _, _ = run(["compare", second, first, "--exact", "--quiet"], capsys)
    assert status == 0


def test_config_bad_input_and_existing_output(line, tmp_path, capsys):
    status, _, err = run(["config", tmp_path / "none.h5"], capsys)
    assert_user_error(status, err, "no such file")
    status, _, err = run(["config", line], capsys)
    assert_user_error(status, err, "not an HDF5")
    result = tmp_path / "r.h5"
    run(["run", line, "--out", result, "--quiet", "--nvel", "30"], capsys)
    out = tmp_path / "c.toml"
    out.write_text("keep\n")
    status, _, err = run(["config", result, "--out", out], capsys)
    assert_user_error(status, err, "exists", "--force")
    assert out.read_text() == "keep\n"
    status, _, err = run(["config", result, "--out", out, "--force"], capsys)
    assert status == 0 and load_toml(out).scan.nvel == 30
    assert not list(tmp_path.glob("*.partial"))
