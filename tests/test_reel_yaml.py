"""reel.yaml: schema validation with defaults, and errors naming file, line and key."""

import pytest

from kinset.errors import InputError
from kinset.io.reel import load_reel


def test_defaults_filled_and_material_sets_eg_xti(write, tmp_path):
    write("reel.yaml", "material: schottky\n")
    reel = load_reel(tmp_path)
    s = reel.settings
    assert reel.id == tmp_path.name
    assert s["reference_temperature_C"] == 25
    assert s["accuracy"]["voltage"]["offset_V"] == pytest.approx(1e-4)
    assert s["recovery"]["end"] == {"fraction_of_peak": 0.1}
    assert s["leakage"]["breakdown_current_A"] == pytest.approx(1e-4)
    # From memory of the usual SPICE values for a Schottky barrier: EG 0.69 eV, XTI 2.
    assert (reel.eg, reel.xti) == (0.69, 2.0)
    assert reel.reference_temperature == pytest.approx(298.15)


def test_explicit_eg_overrides_material(write, tmp_path):
    write("reel.yaml", "material: silicon\neg_eV: 1.12\n")
    assert load_reel(tmp_path).eg == 1.12


@pytest.mark.parametrize("text,line,words", [
    ("material: silicon\nacuracy: {}\n", 2, "unknown key 'acuracy'"),
    ("material: silicon\naccuracy:\n  voltage:\n    gian: 1.0e-4\n", 4, "unknown key 'gian'"),
    ("part: x\n", None, "missing required key"),
    ("material: silcon\n", 1, "silcon"),
    ("material: silicon\nreference_temperature_C: warm\n", 2, "warm"),
    ("material: silicon\nrecovery:\n  end: {fraction: 0.1}\n", 3, "does not fit"),
    ("material: [silicon\n", 2, "on line 1"),
])
def test_typos_are_named(write, tmp_path, text, line, words):
    p = write("reel.yaml", text)
    with pytest.raises(InputError) as err:
        load_reel(tmp_path)
    assert err.value.file == str(p)
    assert err.value.line == line
    assert words in str(err.value)


def test_yaml_is_loaded_safely(write, tmp_path):
    # A Python-object tag must not be constructed (PyYAML safe loader).
    write("reel.yaml", "material: !!python/object/apply:os.system ['echo hi']\n")
    with pytest.raises(InputError):
        load_reel(tmp_path)


def test_missing_reel_yaml(tmp_path):
    with pytest.raises(InputError, match="no reel.yaml"):
        load_reel(tmp_path)


def test_exponent_without_dot_is_a_number(write, tmp_path):
    # YAML 1.2 reads 1e-4 as a number; PyYAML's 1.1 rules would read it as text.
    write("reel.yaml", "material: silicon\nleakage: {breakdown_current_A: 1e-4}\n")
    assert load_reel(tmp_path).settings["leakage"]["breakdown_current_A"] == 1e-4
