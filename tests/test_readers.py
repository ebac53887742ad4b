"""Readers: units in column names, comments, column order, both forward forms, errors."""

import numpy as np
import pytest

from kinset.errors import InputError
from kinset.io.datasets import read_capacitance, read_forward, read_leakage, read_recovery
from kinset.io.units import unit_scale


@pytest.mark.parametrize("unit,dimension,scale", [
    # SI prefixes: BIPM SI Brochure, 9th ed. (2019), Table 7.
    ("mA", "current", 1e-3), ("uA", "current", 1e-6), ("\u00b5A", "current", 1e-6),
    ("nA", "current", 1e-9), ("mV", "voltage", 1e-3), ("pF", "capacitance", 1e-12),
    ("ns", "time", 1e-9), ("MHz", "frequency", 1e6), ("kohm", "resistance", 1e3),
    ("Mohm", "resistance", 1e6), ("V", "voltage", 1.0), ("fF", "capacitance", 1e-15),
])
def test_si_prefixes(unit, dimension, scale):
    assert unit_scale(unit, dimension) == (pytest.approx(scale, rel=1e-15), 0.0)


def test_celsius_becomes_kelvin():
    # Celsius scale offset 273.15 K: BIPM SI Brochure §2.3.1.
    assert unit_scale("C", "temperature") == (1.0, 273.15)


def test_supply_and_resistor_worked_example(write):
    # Common practice (bench worked example): 10 V supply, 10.6 kΩ measured, 0.639 V
    # across the diode -> (10 - 0.639) / 10 600 ≈ 0.883 mA.
    p = write("f.csv", "device,supply_V,resistance_kohm,voltage_V\nD1,10,10.6,0.639\n")
    frame = read_forward(p)
    assert frame["current"].iloc[0] == pytest.approx((10 - 0.639) / 10600, rel=1e-12)
    assert frame["current"].iloc[0] == pytest.approx(0.883e-3, rel=1e-3)


def test_comments_column_order_many_devices_and_prefixes(write):
    p = write("f.csv", "# exported by the bench\n# second comment\n"
                       "temperature_C,current_mA,device,voltage_mV,position\n"
                       "25,1,D1,650,3\n  # a comment inside\n35,2,D2,660,4\n\n")
    f = read_forward(p)
    assert list(f["device"]) == ["D1", "D2"]
    np.testing.assert_allclose(f["current"], [1e-3, 2e-3])
    np.testing.assert_allclose(f["voltage"], [0.65, 0.66])
    np.testing.assert_allclose(f["temperature"], [298.15, 308.15])
    assert list(f["line"]) == [4, 6]
    assert list(f["position"]) == [3, 4]


def test_hash_inside_device_id_is_not_a_comment(write):
    p = write("f.csv", "device,voltage_V,current_A\nD#1,0.6,1e-3\n")
    assert read_forward(p)["device"].iloc[0] == "D#1"


def test_byte_order_mark_is_accepted(tmp_path):
    p = tmp_path / "f.csv"
    p.write_bytes(b"\xef\xbb\xbfdevice,voltage_V,current_A\nD1,0.6,0.001\n")
    assert read_forward(p)["device"].iloc[0] == "D1"


@pytest.mark.parametrize("text,line,column,words", [
    ("device,voltage_V\nD1,0.6\n", 1, None, "missing required column"),
    ("device,voltage_V,current_xA\nD1,0.6,1\n", 1, "current_xA", "unknown SI prefix"),
    ("device,voltage_V,current_V\nD1,0.6,1\n", 1, "current_V", "not a current unit"),
    ("device,voltage_V,current\nD1,0.6,1\n", 1, "current", "has no unit"),
    ("device,voltage_V,current_A\nD1,0.6,1e-3\nD1,abc,2e-3\n", 3, "voltage_V", "not a finite number"),
    ("# c\ndevice,voltage_V,current_A\nD1,0.6,1e-3\nD1,0.7\n", 4, "current_A", "empty"),
    ("device,voltage_V,current_A\nD1,nan,1e-3\n", 2, "voltage_V", "not a finite number"),
    ("device,voltage_V,current_A\nD1,0.6,inf\n", 2, "current_A", "not a finite number"),
    ("device,voltage_V,current_A,voltage_mV\nD1,0.6,1,600\n", 1, "voltage_mV", "appears twice"),
    ("device,voltage_V,current_A\n,0.6,1e-3\n", 2, "device", "empty"),
    ("device,voltage_V,current_A\nD1,0.6,1e-3,7\n", 2, None, "more fields than the header"),
    ("device,voltage_V,current_A\nD1,0.6,1e-3\nD1,0.6,1e-3,7\n", 3, None, "does not fit the header"),
])
def test_bad_input_names_file_line_and_column(write, text, line, column, words):
    p = write("bad.csv", text)
    with pytest.raises(InputError) as err:
        read_forward(p)
    e = err.value
    assert e.file == str(p)
    assert e.line == line
    assert e.column == column
    assert words in str(e)
    assert str(p) in str(e)


def test_non_utf8_bytes_name_the_line(tmp_path):
    p = tmp_path / "f.csv"
    p.write_bytes(b"device,voltage_V,current_A\nD1,0.6,1e-3\nD\xe92,0.6,1e-3\n")
    with pytest.raises(InputError) as err:
        read_forward(p)
    assert err.value.line == 3 and "UTF-8" in str(err.value)


def test_empty_file(write):
    with pytest.raises(InputError, match="no header"):
        read_forward(write("f.csv", "# only a comment\n"))


def test_other_datasets_read_in_si(write):
    lk = read_leakage(write("l.csv", "device,reverse_voltage_V,reverse_current_nA\nD1,20,3.5\n"))
    assert lk["reverse_current"].iloc[0] == pytest.approx(3.5e-9)
    cv = read_capacitance(write("c.csv", "device,reverse_voltage_V,capacitance_pF,frequency_MHz\n"
                                         "D1,0,2.1,1\n"))
    assert cv["capacitance"].iloc[0] == pytest.approx(2.1e-12)
    assert cv["frequency"].iloc[0] == pytest.approx(1e6)
    rr = read_recovery(write("r.csv", "device,time_ns,current_mA\nD1,0.5,10\n"))
    assert rr["time"].iloc[0] == pytest.approx(0.5e-9)
    assert rr["current"].iloc[0] == pytest.approx(1e-2)


def test_blanks_after_separators_are_skipped(write):
    # Reference: pandas.read_csv(skipinitialspace=True) of the same text (kinset passes the
    # option only to files that hold a blank; the numbers must be the same either way).
    import io
    import pandas as pd
    text = "device, voltage_V,  current_A\n D1, 0.6,  1e-3\nD2,0.7,2e-3\n"
    f = read_forward(write("f.csv", text))
    ref = pd.read_csv(io.StringIO(text), skipinitialspace=True)
    assert list(f["device"]) == [d.strip() for d in ref["device"]] == ["D1", "D2"]
    assert list(f["voltage"]) == list(ref["voltage_V"])
    assert list(f["current"]) == list(ref["current_A"])
