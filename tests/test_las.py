"""The LAS 2.0 reader on the two open well logs (against lasio, an independent reader, and the
figures of ../shared/data/wells/SOURCES.md) and on small files written here, and the sonic
blocking that turns a log into a layered model."""

import numpy as np
import pytest
from conftest import WELLS, need_well
from scipy.integrate import trapezoid

from velspec.errors import InputError
from velspec.io.las import read_las, read_sonic
from velspec.synth import blocked_model_from_sonic, zero_offset_times

F03 = WELLS / "F03-02.las"
P135 = WELLS / "P-135.las"


def need(path):
    return need_well(path.name)


def v_of(dt):
    return 0.3048e6 / dt  # m/s from us/ft: 1 ft = 0.3048 m exactly


# --- the open logs: numbers from ../shared/data/wells/SOURCES.md ------------------------------


def test_f03_02_depth_range_and_velocities():
    curves, units, well = read_las(need(F03))
    assert well["WRAP"].startswith("NO")
    assert units["DT"].upper() == "US/F" and units["DEPT"].upper() == "M"
    assert np.all(np.diff(curves["DEPT"]) > 0)  # the file runs deep to shallow; returned increasing
    ok = np.isfinite(curves["DT"])
    z, v = curves["DEPT"][ok], v_of(curves["DT"][ok])
    # SOURCES.md: DT from 305 to 2146 m
    assert z.min() == pytest.approx(305.0, abs=1.0)
    assert z.max() == pytest.approx(2146.0, abs=1.0)
    # SOURCES.md: velocity 1.9-4.4 km/s; nearly all samples within it widened by 5 %
    inside = (v > 0.95 * 1900.0) & (v < 1.05 * 4400.0)
    assert inside.mean() > 0.95
    assert 1900.0 < np.median(v) < 4400.0
    # SOURCES.md: fast chalk below about 1.8 km
    assert np.median(v[z > 1850.0]) > 1.3 * np.median(v[z < 1750.0])
    # absent values (-9999 in this file, whose header declares -999.25) are NaN, not numbers
    for c in curves.values():
        assert not np.any(np.isin(c, (-999.25, -9999.0)))


def test_p135_wrapped_file_depth_range_and_velocities():
    curves, units, well = read_las(need(P135))
    assert well["WRAP"].startswith("YES")
    assert len(curves) == 23 and "DTS" in curves
    ok = np.isfinite(curves["DT"])
    z, v = curves["DEPT"][ok], v_of(curves["DT"][ok])
    # SOURCES.md: DT from 259 to 939 m, velocity 3.7-5.6 km/s, median about 5.0 km/s
    assert z.min() == pytest.approx(259.0, abs=1.0)
    assert z.max() == pytest.approx(939.0, abs=1.0)
    assert v.min() > 3700.0 * 0.99 and v.max() < 5600.0 * 1.01
    assert np.median(v) == pytest.approx(5000.0, abs=100.0)
    # the shear log is slower than the P log wherever both exist (Vp/Vs > 1, physics)
    both = ok & np.isfinite(curves["DTS"])
    assert both.sum() > 100 and np.all(curves["DTS"][both] > curves["DT"][both])


# --- the open logs against lasio (an independent LAS reader from PyPI), sample by sample ------

# Absent-value markers of each file: the NULL its ~Well section declares (LAS 2.0, CWLS 1992) and,
# for F03-02, the -9999 its data actually use (SOURCES.md: "absent value -9999 / -999.25").
DOCUMENTED_ABSENT = {"F03-02.las": (-999.25, -9999.0), "P-135.las": (-999.25,)}


@pytest.mark.parametrize("name", ["F03-02.las", "P-135.las"])
def test_open_logs_agree_with_lasio_sample_by_sample(name):
    lasio = pytest.importorskip("lasio", reason="lasio (the reference LAS reader) is in the test extra")
    path = need_well(name)
    # null_policy "none": lasio's raw numbers, so which values count as absent is judged here,
    # from the file's header and SOURCES.md, not by either reader; engine "normal" reads WRAP YES.
    ref = lasio.read(str(path), null_policy="none", engine="normal")
    curves, units, well = read_las(path)
    assert list(curves) == [c.mnemonic for c in ref.curves]
    assert units == {c.mnemonic: c.unit for c in ref.curves}
    assert well["WRAP"].split()[0].upper() == str(ref.version["WRAP"].value).split()[0].upper()
    for key in ("NULL", "STRT", "STOP", "STEP"):
        assert float(well[key]) == float(ref.well[key].value), key
    raw = np.asarray(ref.data, dtype=np.float64)
    assert raw.shape == (len(curves["DEPT"]), len(curves))     # no absent index in these files
    order = np.argsort(raw[:, 0], kind="stable")                # velspec returns the index increasing
    raw = raw[order]
    absent = np.isin(raw, DOCUMENTED_ABSENT[name])
    assert absent.any()
    for j, (mnem, got) in enumerate(curves.items()):
        want = raw[:, j]
        np.testing.assert_array_equal(np.isnan(got), absent[:, j], err_msg=f"{name} {mnem}: absent samples")
        np.testing.assert_array_equal(got[~absent[:, j]], want[~absent[:, j]], err_msg=f"{name} {mnem}")
    # the index spans the header's STRT..STOP in STEP (P-135: 197.5104-951.8904 m by 0.1524 m,
    # wrapped); F03-02 declares STEP 0 (irregular) and runs from 2153.8647 m up to 9.906 m
    z = curves["DEPT"]
    strt, stop = sorted((float(well["STRT"]), float(well["STOP"])))
    assert z[0] == pytest.approx(strt, abs=1e-6) and z[-1] == pytest.approx(stop, abs=1e-6)
    step = float(well["STEP"])
    if step:
        assert z.size == round((stop - strt) / abs(step)) + 1
        np.testing.assert_allclose(np.diff(z), abs(step), atol=1e-3)


def test_read_sonic_matches_read_las():
    z, dt = read_sonic(need(F03))
    curves, _, _ = read_las(F03)
    ok = np.isfinite(curves["DT"])
    np.testing.assert_array_equal(z, curves["DEPT"][ok])
    np.testing.assert_array_equal(dt, curves["DT"][ok])


def test_blocked_f03_model_keeps_the_integrated_sonic_time():
    # integrated sonic time, two-way: T = 2 * integral(slowness dz) (sonic integration, common
    # practice), computed independently with scipy's trapezoid; overburden assumed here, not from
    # the log: 305 m from the datum at a stated 1800 m/s.
    z, dt = read_sonic(need(F03))
    slow = dt * 1e-6 / 0.3048
    thickness, velocity = blocked_model_from_sonic(
        z, dt, overburden_velocity=1800.0, min_two_way=0.05
    )
    t0 = zero_offset_times(thickness, velocity)
    expected = 2 * z[0] / 1800.0 + 2 * trapezoid(slow, z)
    assert t0[-1] == pytest.approx(expected, rel=1e-10)
    assert thickness[0] == pytest.approx(z[0]) and velocity[0] == 1800.0
    assert thickness.sum() == pytest.approx(z[-1], rel=1e-12)
    blocks = np.diff(t0)
    assert np.all(blocks >= 0.05 - 1e-12)
    assert np.ptp(blocks) < 1e-9  # equal two-way time per block
    # block velocities are averages of the log, so they stay within its extremes and within
    # the range SOURCES.md gives, and the chalk below ~1.8 km stays fast
    v_log = v_of(dt)
    assert np.all(velocity[1:-1] >= v_log.min()) and np.all(velocity[1:-1] <= v_log.max())
    assert np.all((velocity[1:-1] > 1800.0) & (velocity[1:-1] < 4600.0))
    depth_top = np.r_[0.0, np.cumsum(thickness)[:-1]]
    assert np.median(velocity[:-1][depth_top > 1850.0]) > 3500.0
    assert velocity[-1] == velocity[-2]


# --- small files written here, laid out as the LAS 2.0 standard describes (CWLS, 1992) --------

HEADER = """~VERSION INFORMATION
 VERS.                 2.0 :   CWLS LOG ASCII STANDARD - VERSION 2.0
 WRAP.                 {wrap} :   wrap mode
~WELL INFORMATION
#MNEM.UNIT      DATA                  DESCRIPTION
 STRT.M        120.0                 : START DEPTH
 STOP.M        119.0                 : STOP DEPTH
 STEP.M         -0.5                 : STEP
 NULL.        -999.25                : NULL VALUE
 WELL.          INVENTED WELL 7      : WELL
 DATE.          2024-03-01 12:30     : LOG DATE
~CURVE INFORMATION
 DEPT.M                              : 1  DEPTH
 DT  .US/F                           : 2  SONIC TRANSIT TIME
 RHOB.K/M3                           : 3  BULK DENSITY
 RT  .OHM.M                          : 4  RESISTIVITY
~A
"""


def write(tmp_path, name, wrap, body):
    path = tmp_path / name
    path.write_text(HEADER.format(wrap=wrap) + body)
    return path


def test_wrapped_and_unwrapped_files_read_the_same(tmp_path):
    rows = "120.0 100.0 2300 -999.25\n119.5 110.0 2350 12.5\n119.0 -9999 2400 13.0\n"
    # WRAP YES: the index alone on its line, the other values on the lines after it
    spread = "120.0\n 100.0 2300\n -999.25\n119.5\n110.0 2350 12.5\n119.0\n-9999 2400\n13.0\n"
    flat = write(tmp_path, "flat.las", "NO", rows)
    wrapped = write(tmp_path, "wrap.las", "YES", spread)
    a, ua, wa = read_las(flat)
    b, ub, wb = read_las(wrapped)
    assert list(a) == ["DEPT", "DT", "RHOB", "RT"] and ua == ub
    assert ua["RT"] == "OHM.M" and ua["DT"] == "US/F"
    for k in a:
        np.testing.assert_array_equal(a[k], b[k])
    np.testing.assert_array_equal(a["DEPT"], [119.0, 119.5, 120.0])  # sorted increasing
    np.testing.assert_array_equal(a["DT"], [np.nan, 110.0, 100.0])  # -9999 read as absent
    np.testing.assert_array_equal(a["RT"], [13.0, 12.5, np.nan])  # the declared NULL
    assert wa["WELL"] == "INVENTED WELL 7"
    assert wa["DATE"] == "2024-03-01 12:30"  # a colon inside the value survives
    assert wa["NULL"] == "-999.25"


def test_sonic_in_feet_and_us_per_metre_is_converted(tmp_path):
    text = HEADER.replace("DEPT.M ", "DEPT.FT").replace("DT  .US/F", "DT  .US/M ")
    path = tmp_path / "ft.las"
    path.write_text(text.format(wrap="NO") + "1000 328.084 1 1\n1001 300 1 1\n")
    z, dt = read_sonic(path)
    np.testing.assert_allclose(z, [1000 * 0.3048, 1001 * 0.3048])
    np.testing.assert_allclose(dt, [328.084 * 0.3048, 300 * 0.3048])  # us/m -> us/ft


@pytest.mark.parametrize(
    "body, message",
    [
        ("120.0 100.0 2300\n", "values for 4 curves"),
        ("120.0 100.0 2300 1\n119.5 abc 1 1\n", "non-numeric"),
    ],
)
def test_malformed_data_is_refused(tmp_path, body, message):
    with pytest.raises(InputError, match=message):
        read_las(write(tmp_path, "bad.las", "NO", body))


def test_missing_sections_are_refused(tmp_path):
    path = tmp_path / "nodata.las"
    path.write_text(HEADER.format(wrap="NO").replace("~A\n", ""))
    with pytest.raises(InputError, match="Ascii"):
        read_las(path)
    with pytest.raises(InputError, match="cannot read"):
        read_las(tmp_path / "absent.las")


def test_blocking_a_constant_and_a_two_step_log():
    # v = 0.3048e6 / DT by the definition of the foot: 100 us/ft is 3048 m/s
    z = np.arange(100.0, 1100.0, 0.5)
    th, vel = blocked_model_from_sonic(z, np.full(z.size, 100.0), overburden_velocity=1500.0)
    np.testing.assert_allclose(vel[1:], 3048.0, rtol=1e-12)
    assert th[0] == 100.0 and vel[0] == 1500.0
    # two steps of 0.2 s two-way each; blocks of 0.1 s recover both velocities exactly
    v1, v2 = 2000.0, 3000.0
    za = np.linspace(0.0, 200.0, 401)
    zb = np.linspace(200.0 + 1e-9, 500.0, 601)
    dt = np.r_[np.full(za.size, 0.3048e6 / v1), np.full(zb.size, 0.3048e6 / v2)]
    th, vel = blocked_model_from_sonic(
        np.r_[za, zb], dt, overburden_velocity=999.0, min_two_way=0.1
    )
    # (no overburden layer: the log starts at the datum)
    assert th.size == 4
    np.testing.assert_allclose(vel[:2], v1, rtol=1e-6)
    np.testing.assert_allclose(vel[2:4], v2, rtol=1e-6)
    with pytest.raises(ValueError):
        blocked_model_from_sonic(z, np.full(z.size, 100.0), overburden_velocity=-1.0)
