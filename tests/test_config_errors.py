"""Every config validation rule fires with a message naming file, table, key, value and range."""

from __future__ import annotations

import copy
import subprocess
import sys
import tomllib

import pytest

from design.config import ConfigError, from_dict, load
from design.project import from_config

from .helpers import DEMO

BASE = tomllib.loads(DEMO.read_text())


def cfg_with(table, **kv):
    d = copy.deepcopy(BASE)
    d.setdefault(table, {}).update(kv)
    return d


def err(data) -> str:
    with pytest.raises(ConfigError) as ei:
        from_config(from_dict(data, "demo.toml"))
    return str(ei.value)


def test_demo_is_valid():
    from_config(load(DEMO))


def test_unknown_key_suggests():
    m = err(cfg_with("spec", vout_rms=400.0))
    assert "demo.toml" in m and "[spec]" in m and "'vout_rms'" in m and "did you mean 'vout'" in m


def test_unknown_key_near_miss_names_the_right_key():
    m = err(cfg_with("spec", efficency=0.9))
    assert "unknown key in [spec] 'efficency'" in m and "did you mean 'efficiency'" in m


def test_unknown_table():
    d = copy.deepcopy(BASE)
    d["contorl"] = {}
    m = err(d)
    assert "unknown table 'contorl'" in m and "did you mean 'control'" in m


@pytest.mark.parametrize("value", ["400", True, [400]])
def test_wrong_type(value):
    m = err(cfg_with("spec", vout=value))
    assert "[spec] vout" in m and "expected a number" in m


def test_wrong_type_string_key():
    m = err(cfg_with("control", number_format=32))
    assert "[control] number_format" in m and "expected a string" in m


def test_bad_choice():
    m = err(cfg_with("control", number_format="double"))
    assert "'double'" in m and "float32, q15" in m


@pytest.mark.parametrize(
    "key,lo,hi",
    [("power", 10, 1e5), ("fsw", 5e3, 1e6), ("vout", 100, 1000), ("vin_rms_min", 40, 300)],
)
@pytest.mark.parametrize("value", [0.0, -5.0, 1e300])
def test_ratings_outside_the_tools_scope(key, lo, hi, value):
    """The ratings' ranges state the tool's scope (single-phase lines, kW-class buses)."""
    m = err(cfg_with("spec", **{key: value}))
    assert f"[spec] {key} = {value:g}" in m and f"allowed range is >= {lo:g} and <= {hi:g}" in m


@pytest.mark.parametrize("value", [0.0, 1.2, -0.1])
def test_efficiency_range(value):
    m = err(cfg_with("spec", efficiency=value))
    assert f"[spec] efficiency = {value:g}" in m and "> 0 and <= 1" in m


def test_efficiency_one_is_allowed():
    from_config(from_dict(cfg_with("spec", efficiency=1.0)))


def test_vin_max_below_min():
    m = err(cfg_with("spec", vin_rms_max=80.0))
    assert "[spec] vin_rms_max = 80 V" in m and "vin_rms_min = 90 V" in m


@pytest.mark.parametrize("f", [44.9, 66.1, 400.0])
def test_line_freq_range(f):
    m = err(cfg_with("spec", line_freq=f))
    assert f"[spec] line_freq = {f:g} Hz" in m and ">= 45 and <= 66" in m


def test_vout_not_above_peak():
    m = err(cfg_with("spec", vout=370.0))
    assert "[spec] vout = 370 V" in m and "373.4 V" in m and "boost cannot regulate" in m


def test_fsw_not_100x_line():
    m = err(cfg_with("spec", fsw=5500.0, line_freq=60.0))
    assert "[spec] fsw = 5500 Hz" in m and "100 x line_freq = 6000 Hz" in m


def test_missing_required_key():
    d = copy.deepcopy(BASE)
    del d["spec"]["power"]
    m = err(d)
    assert "[spec] power: missing" in m


def test_holdup_floor_above_vout():
    m = err(cfg_with("spec", vout_min_holdup=410.0))
    assert "vout_min_holdup = 410 V" in m and "< vout = 400 V" in m


def test_brownout_hysteresis():
    m = err(cfg_with("protection", brownout_off_rms=80.0, brownout_on_rms=78.0))
    assert "brownout_on_rms = 78 V" in m and "hysteresis" in m


def test_sensor_range_below_trip():
    m = err(cfg_with("sensing", il_range=30.0))
    assert "[sensing] il_range = 30 A" in m and "oc_trip" in m


def test_non_integer_count():
    m = err(cfg_with("sensing", adc_bits=12.5))
    assert "[sensing] adc_bits" in m and "whole number" in m


def test_cli_exit_code_2_no_traceback(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(DEMO.read_text().replace("efficiency = 0.96", "efficiency = 1.5"))
    r = subprocess.run(
        [sys.executable, "-m", "harness.cli", "design", str(bad)], capture_output=True, text=True
    )
    assert r.returncode == 2
    assert "Traceback" not in r.stderr
    assert str(bad) in r.stderr and "[spec] efficiency = 1.5" in r.stderr


def test_cli_bad_toml(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("[spec\nvout = 1")
    r = subprocess.run(
        [sys.executable, "-m", "harness.cli", "design", str(bad)], capture_output=True, text=True
    )
    assert r.returncode == 2 and "not valid TOML" in r.stderr and "Traceback" not in r.stderr


def test_a_bus_without_headroom_over_the_line_peak_is_refused():
    """A boost's bus must stay above its input (Erickson & Maksimovic, the boost's conversion
    ratio 1/(1 - D) >= 1): with vout 380 V, 2 % ripple and a 264 V line (373.4 V peak) the bus
    trough, 376.2 V, is within the firmware's 2 %-of-vout diode margin of the peak.  Found by
    the design-space survey: such designs latched on over-current at high-line starts."""
    msg = err(cfg_with("spec", vout=380.0, vin_rms_max=264.0, ripple_voltage_pp=0.02))
    assert "[spec] vout = 380" in msg and "trough" in msg and "376.2" in msg
    # 8 V more of bus and it is accepted (the soft start left to its rule: the bigger
    # capacitor of a 2 % ripple asks more than the demo's 0.1 s allows)
    ok = cfg_with("spec", vout=388.0, vin_rms_max=264.0, ripple_voltage_pp=0.02)
    del ok["control"]["soft_start_time"]
    from_config(from_dict(ok, "x"))


def test_x_cap_compensation_needs_a_filter():
    d = cfg_with("control", x_cap_compensation="on")
    d["plant"]["x_capacitance"] = 0.0
    m = err(d)
    assert "demo.toml" in m and "x_cap_compensation" in m and "x_capacitance = 0" in m
    m = err(cfg_with("control", x_cap_compensation="yes"))
    assert "[control] x_cap_compensation" in m and "on" in m and "off" in m


def test_a_filter_resonating_near_the_line_is_refused():
    """1 mF with 10 mH resonates at 50 Hz: the zero-crossing debounce that outlasts its ring
    would be hundreds of samples, past the detector's range; refused, naming the keys."""
    d = copy.deepcopy(BASE)
    d["plant"].update(x_capacitance=1e-3, dm_inductance=0.01)
    m = err(d)
    assert "demo.toml" in m and "x_capacitance" in m and "dm_inductance" in m and "Hz" in m
