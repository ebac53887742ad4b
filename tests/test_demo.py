"""The demo reel and the physics it is generated with.

The demo must be reproducible byte for byte (the committed ``data_demo/`` is what
``kinset demo`` writes with the default arguments), must be valid input for every
reader, and must look like a reel of small-signal silicon switching diodes. The
physics functions are checked against values from outside kinset; each check names
its source beside it.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from kinset.demo import DEFAULT_DEVICES, demo_parameters, write_demo
from kinset.io.datasets import (read_capacitance, read_capacitance_index, read_forward,
                                read_leakage, read_recovery)
from kinset.io.reel import load_reel
from kinset.physics.capacitance import (junction_capacitance, reflection_coefficient,
                                        series_rlc_impedance)
from kinset.physics.leakage import generation_temperature_factor, reverse_current
from kinset.physics.recovery import recovery_waveform, storage_time

ROOT = Path(__file__).resolve().parents[1]
COMMITTED = ROOT / "data_demo"
REGENERATE = "python -c \"from kinset.demo import write_demo; write_demo('data_demo')\""


def _files(folder: Path) -> list[str]:
    return sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file())


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    return write_demo(tmp_path_factory.mktemp("demo") / "reel")


@pytest.fixture(scope="module")
def truth() -> pd.DataFrame:
    return demo_parameters()


# --------------------------------------------------------------------------- reproducible

def test_demo_matches_committed_data_demo(demo):
    committed = _files(COMMITTED) if COMMITTED.is_dir() else []
    assert committed, f"data_demo/ is empty; regenerate it with {REGENERATE}"
    assert _files(demo) == committed, f"file list differs; regenerate with {REGENERATE}"
    differ = [n for n in committed if (demo / n).read_bytes() != (COMMITTED / n).read_bytes()]
    assert not differ, f"{len(differ)} file(s) differ, e.g. {differ[:3]}; {REGENERATE}"


def test_rewrite_replaces_an_older_demo_and_seed_matters(tmp_path):
    write_demo(tmp_path / "a", devices=40, seed=7)
    write_demo(tmp_path / "a", devices=20, seed=7)      # fewer files than before
    write_demo(tmp_path / "b", devices=20, seed=7)
    write_demo(tmp_path / "c", devices=20, seed=8)
    a, b, c = (tmp_path / x for x in "abc")
    assert _files(a) == _files(b)
    assert all((a / n).read_bytes() == (b / n).read_bytes() for n in _files(b))
    name = "forward/batch_a_sweep.csv"
    assert (b / name).read_bytes() != (c / name).read_bytes()


def test_demo_never_overwrites_a_real_reel_yaml(tmp_path):
    (tmp_path / "reel.yaml").write_text("material: silicon\n", encoding="utf-8")
    with pytest.raises(FileExistsError, match="not written by kinset demo"):
        write_demo(tmp_path, devices=20)
    assert (tmp_path / "reel.yaml").read_text(encoding="utf-8") == "material: silicon\n"


def test_demo_size_stays_small(demo):
    total = sum((demo / n).stat().st_size for n in _files(demo))
    assert total < 3_000_000


# --------------------------------------------------------------------------- valid input

def test_demo_reel_yaml_validates(demo):
    reel = load_reel(demo)
    assert reel.id == "demo-0412"
    assert reel.settings["material"] == "silicon"
    assert reel.settings["thermal_resistance_K_per_W"] == 300
    assert reel.settings["self_heating"] == "correct"     # the sweeps are steady-state DC
    assert reel.settings["leakage"] == {"report_at_V": [20], "breakdown_current_A": 1.0e-4}
    assert reel.settings["recovery"]["end"] == {"fraction_of_peak": 0.1}
    raw = yaml.safe_load((demo / "reel.yaml").read_text(encoding="utf-8"))
    assert raw["applications"] == ["audio_clipper_pair", "ring_mixer_quad"]   # the contract's pair, pairs first


def test_every_forward_file_reads(demo, truth):
    reel = load_reel(demo)
    files = reel.dataset_files("forward")
    assert len(files) == 5
    frames = {p.stem: read_forward(p) for p in files}
    for stem, frame in frames.items():
        assert len(frame) > 0, stem
        assert (frame["current"] > 0).all(), stem
        assert frame["voltage"].between(0.3, 0.9).all(), stem
        assert frame["position"].notna().all(), stem
    seen = set().union(*(set(f["device"]) for f in frames.values()))
    assert seen == set(truth["device"])     # every device has forward readings
    check = frames["batch_d_diode_check"]
    assert check.groupby("device").size().eq(1).all()
    assert np.allclose(check["current"], 0.63e-3)
    supply = frames["batch_e_supply"]       # current = (supply - voltage) / resistance
    assert supply.groupby("device").size().eq(6).all()
    assert supply["current"].between(30e-6, 10e-3).all()
    warm = frames["batch_c_sweep_warm"]["temperature"] - 273.15
    assert warm.between(34.0, 36.0).all()


def test_other_datasets_read(demo, truth):
    reel = load_reel(demo)
    leak = pd.concat([read_leakage(p) for p in reel.dataset_files("leakage")])
    assert set(leak["device"]) == set(truth["device"])
    assert (leak["reverse_current"] > 0).all()
    cv = pd.concat([read_capacitance(p) for p in reel.dataset_files("capacitance")])
    assert set(cv["device"]) == set(truth.loc[truth["capacitance"] != "", "device"])
    assert cv.groupby("device").size().eq(8).all()
    assert np.allclose(cv["frequency"], 1e6)
    rec = pd.concat([read_recovery(p) for p in reel.dataset_files("recovery")])
    assert set(rec["device"]) == set(truth.loc[truth["recovery"], "device"])
    assert rec.groupby("device").size().between(300, 400).all()


def test_touchstone_files_and_index(demo, truth):
    skrf = pytest.importorskip("skrf")
    index = read_capacitance_index(demo / "capacitance" / "index.csv")
    assert set(index["fixture"]) == {"reflection"}
    assert sorted(index.loc[index["device"] == "open", "reverse_voltage"]) == [0.0, 2.0, 5.0]
    devices = set(index["device"]) - {"open"}
    assert devices == set(truth.loc[truth["capacitance"] == "cv+vna", "device"])
    assert len(devices) == 20
    on_disk = {p.name for p in (demo / "capacitance").glob("*.s1p")}
    assert on_disk == set(index["file"])
    for name in sorted(on_disk)[:4]:
        net = skrf.Network(str(demo / "capacitance" / name))
        assert net.nports == 1 and len(net.f) == 51
        assert net.f[0] == 10e6 and net.f[-1] == 1e9


# --------------------------------------------------------------------------- realistic

def test_demo_leakage_is_a_few_nanoamps_with_damaged_parts(demo, truth):
    leak = pd.concat([read_leakage(p) for p in load_reel(demo).dataset_files("leakage")])
    at20 = leak[leak["reverse_voltage"] == 20].set_index("device")["reverse_current"]
    damaged = truth.loc[truth["role"] == "damaged leaky", "device"]
    normal = at20.drop(damaged)
    # From memory of small-signal switching-diode data sheets: max 25 nA at 20 V,
    # typical a few nA.
    assert 1e-9 < normal.median() < 1e-8
    assert normal.max() < 25e-9
    ratio = at20[damaged] / normal.median()
    assert len(damaged) == 5 and ratio.between(15, 110).all()    # the brief: 20-100x


def test_demo_breakdown_sweeps_end_at_the_current_limit(demo, truth):
    leak = pd.concat([read_leakage(p) for p in load_reel(demo).dataset_files("leakage")])
    broken = truth[truth["role"] == "breakdown in sweep"]
    assert len(broken) == 4
    for _, d in broken.iterrows():
        sweep = leak[leak["device"] == d["device"]]
        last = sweep.iloc[-1]
        assert abs(last["reverse_current"] - 1e-3) < 1e-6
        assert d["bv_V"] < last["reverse_voltage"] < d["bv_V"] + 3.0
        assert (sweep["reverse_current"].iloc[:-1] < 1e-3).all()
    # Parts without breakdown in the sweep stay far below the 1e-4 A of reel.yaml.
    others = leak[~leak["device"].isin(broken["device"])]
    assert others["reverse_current"].max() < 1e-5


def test_demo_forward_voltage_falls_in_the_warm_batch(demo):
    frames = {p.stem: read_forward(p) for p in load_reel(demo).dataset_files("forward")}

    def at_1ma(frame):                      # the swept current nearest 1 mA
        levels = np.unique(frame["current"])
        near = levels[np.argmin(np.abs(np.log(levels / 1e-3)))]
        return frame.loc[frame["current"] == near, "voltage"].median()

    shift = at_1ma(frames["batch_c_sweep_warm"]) - at_1ma(frames["batch_a_sweep"])
    # Common practice: a silicon diode's forward voltage falls about 2 mV/K; the warm
    # batch is 10 K warmer (device spread ~5 mV allowed for).
    assert -0.030 < shift < -0.012


def test_demo_diode_check_reads_near_0_6_volt(demo):
    check = read_forward(demo / "forward" / "batch_d_diode_check.csv")
    # From memory: a small-signal silicon diode reads about 0.55-0.70 V on a meter's
    # diode check.
    assert check["voltage"].between(0.55, 0.70).all()


def test_demo_parameters_have_the_drawn_spreads_and_correlations(truth):
    assert len(truth) == DEFAULT_DEVICES
    # From memory of typical small-signal switching-diode SPICE cards at 25 C.
    assert 2e-9 < truth["is_A"].median() < 4e-9
    assert truth["n"].between(1.8, 1.95).all()
    assert truth["rs_ohm"].between(0.45, 1.05).all()
    assert truth["cjo_F"].between(1.5e-12, 2.5e-12).all()
    assert truth["tt_s"].between(4e-9, 10e-9).all()
    # Across one part number IS and N are strongly correlated.
    assert np.corrcoef(np.log(truth["is_A"]), truth["n"])[0, 1] > 0.6


def test_demo_recovery_time_follows_the_model(demo, truth):
    rec = pd.concat([read_recovery(p) for p in load_reel(demo).dataset_files("recovery")])
    t = truth.set_index("device")
    errors = []
    for dev, w in rec.groupby("device"):
        time, cur = w["time"].to_numpy(), w["current"].to_numpy()
        k = np.flatnonzero((cur[:-1] > 0) & (cur[1:] <= 0))[0]
        t0 = time[k] + (time[k + 1] - time[k]) * cur[k] / (cur[k] - cur[k + 1])
        end = time[np.flatnonzero(cur < -1e-3)[-1]]          # last sample below 0.1 IR
        expected = storage_time(0.01, 0.01, t.loc[dev, "tt_s"]) \
            + t.loc[dev, "recovery_tau_s"] * np.log(10)
        errors.append(end - t0 - expected)
    # Kingston 1954 storage time plus the exponential tail (recovery_waveform's Notes);
    # the scope noise is 1 % of IF.
    assert abs(np.median(errors)) < 0.15e-9
    assert np.percentile(np.abs(errors), 90) < 0.6e-9


# --------------------------------------------------------------------------- physics

def test_junction_capacitance_matches_ngspice():
    # ngspice 39: diode CJO=10p VJ=0.7 M=0.5, AC admittance at 1 MHz.
    c = junction_capacitance([1.0, 5.0], 10e-12, 0.7, 0.5)
    assert c == pytest.approx([6.4169e-12, 3.5044e-12], rel=2e-5)
    # ngspice 39, same model with FC=0.5, 0.5 V forward (beyond FC*VJ): 17.1726 pF.
    assert junction_capacitance(-0.5, 10e-12, 0.7, 0.5) == pytest.approx(17.1726e-12, rel=2e-5)
    # ngspice 39, 0.2 V forward (below FC*VJ, depletion law): 11.8322 pF.
    assert junction_capacitance(-0.2, 10e-12, 0.7, 0.5) == pytest.approx(11.8322e-12, rel=2e-5)


def test_series_rlc_impedance_at_resonance_is_the_resistance():
    # Textbook series resonance: at w^2 L C = 1 the reactances cancel, Z = R.
    f0 = 1.0 / (2 * np.pi * np.sqrt(1e-9 * 2e-12))
    z = series_rlc_impedance([f0, 1e6], 0.7, 1e-9, 2e-12)
    assert z[0] == pytest.approx(0.7 + 0j, abs=1e-9)
    # Far below resonance the capacitor dominates: X = -1/(wC) = -79577.5 Ohm.
    assert z[1].imag == pytest.approx(-1.0 / (2 * np.pi * 1e6 * 2e-12), rel=1e-3)


def test_reflection_coefficient_of_short_match_and_open():
    # Definition of the reflection coefficient: short -1, matched load 0, open +1.
    g = reflection_coefficient([0.0, 50.0, np.inf])
    assert np.allclose(g, [-1.0, 0.0, 1.0])


def test_generation_current_doubles_about_every_ten_kelvin():
    # Common practice: silicon leakage roughly doubles every 10 K.
    factor = generation_temperature_factor(308.15, 298.15)
    assert 1.6 < factor < 2.6
    assert generation_temperature_factor(298.15, 298.15) == pytest.approx(1.0)


def test_reverse_current_terms():
    t = 298.15
    # Ohm's law: 20 V across a 1 GOhm shunt is 20 nA.
    assert reverse_current(20.0, 1e9, 0.0, 0.7, 0.5, t) == pytest.approx(20e-9, rel=1e-12)
    # Abrupt junction (Sze and Ng 2007): depletion width, and so generation current,
    # grows as sqrt(1 + VR/VJ): at VR = 3 VJ twice the zero-bias value.
    assert reverse_current(2.1, np.inf, 1e-9, 0.7, 0.5, t) == pytest.approx(2e-9, rel=1e-6)
    # Net current vanishes at zero bias (Sah, Noyce and Shockley 1957).
    assert reverse_current(0.0, 1e9, 1e-9, 0.7, 0.5, t, breakdown_voltage=100.0) == 0.0
    # ngspice manual, Junction Diodes: BV is the reverse voltage at which the
    # breakdown current equals IBV.
    i_bv = reverse_current(100.0, np.inf, 0.0, 0.7, 0.5, t, breakdown_voltage=100.0,
                           breakdown_current=1e-4, breakdown_ideality=30.0)
    assert i_bv == pytest.approx(1e-4, rel=1e-9)
    assert np.isnan(reverse_current(-1.0, 1e9, 1e-9, 0.7, 0.5, t))


@pytest.mark.parametrize("i_f, i_r", [(10e-3, 10e-3), (10e-3, 5e-3)])
def test_storage_time_of_the_waveform_is_kingstons(i_f, i_r):
    tt = 10e-9
    # Kingston 1954: ts = TT ln(1 + IF/IR) for a step reversal.
    expected = tt * np.log(1 + i_f / i_r)
    assert storage_time(i_f, i_r, tt) == pytest.approx(expected, rel=1e-12)
    time = np.linspace(-2e-9, 30e-9, 320_001)
    cur = recovery_waveform(time, i_f, i_r, tt, 1e-13, 1e-13)
    # The storage phase holds the circuit current -IR; it ends where recovery starts.
    during = (time > 0.05 * expected) & (time < 0.95 * expected)
    assert np.allclose(cur[during], -i_r, rtol=1e-9)
    end = time[np.flatnonzero(cur < -0.5 * i_r)[-1]]
    assert end == pytest.approx(expected, rel=1e-3)
    assert cur[0] == pytest.approx(i_f) and abs(cur[-1]) < 1e-12
