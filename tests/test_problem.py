"""Problem files: the bundled problems load; malformed input is refused with exact messages."""

import copy
from pathlib import Path

import pytest

from refine.spec.problem import ProblemError, load_problem, parse_problem

PROBLEMS = sorted((Path(__file__).parent.parent / "problems").glob("*.toml"))

BASE = {
    "name": "unit test",
    "response": {
        "family": "chebyshev",
        "ripple_db": 0.1,
        "order": 5,
        "center": "10.5 GHz",
        "bandwidth": "300 MHz",
        "z_ref": "50 ohm",
    },
    "medium": {
        "kind": "microstrip",
        "eps_r": 9.8,
        "height": "0.635 mm",
        "metal_thickness": "5 um",
        "loss_tangent": 1e-4,
        "conductivity": "4.1e7 S/m",
        "roughness": "0.1 um",
    },
    "fab": {"min_gap": "25 um", "min_width": "50 um", "grid": "1 um", "gap_tolerance": "5 um"},
    "coupling": {"external": "gap"},
    "models": {"gap": "garg-bahl"},
    "mask": {
        "passband_return_loss_db": 15,
        "stopband": [{"start": "0 GHz", "stop": "9.9 GHz", "rejection_db": 30}],
    },
}


@pytest.mark.parametrize("path", PROBLEMS, ids=lambda p: p.name)
def test_bundled_problems_load(path):
    p = load_problem(path)
    assert p.f0 > 0 and 0 < p.fbw < 1


def test_contract_example_parses_to_si():
    p = parse_problem(BASE, "x.toml")
    assert p.f0 == pytest.approx(10.5e9)
    assert p.fbw == pytest.approx(0.3 / 10.5)
    assert p.substrate.height == pytest.approx(0.635e-3)
    assert p.substrate.metal_thickness == pytest.approx(5e-6)
    assert p.substrate.conductivity == pytest.approx(4.1e7)
    assert p.fab.min_gap == pytest.approx(25e-6)
    assert p.mask.stopbands[0].stop == pytest.approx(9.9e9)
    assert p.mask.passband_start == pytest.approx(10.35e9)


def test_other_length_units():
    d = copy.deepcopy(BASE)
    d["medium"]["height"] = "25 mil"
    d["fab"]["min_gap"] = "0.001 in"
    p = parse_problem(d, "x.toml")
    assert p.substrate.height == pytest.approx(25 * 25.4e-6)
    assert p.fab.min_gap == pytest.approx(25.4e-6)


def _set(d, dotted, value):
    *path, last = dotted.split(".")
    t = d
    for k in path:
        t = t[k]
    if value is _DELETE:
        del t[last]
    else:
        t[last] = value


_DELETE = object()


@pytest.mark.parametrize(
    ("key", "value", "message"),
    [
        (
            "response.center",
            "10.5 mm",
            "x.toml: response.center = '10.5 mm': must have a unit of frequency (like Hz)",
        ),
        (
            "response.center",
            "-1 GHz",
            "x.toml: response.center = '-1 GHz': outside the allowed range (0, inf) Hz",
        ),
        (
            "response.center",
            10.5e9,
            "response.center = 10500000000.0: must be a string with a unit of frequency",
        ),
        (
            "response.bandwidth",
            "11 GHz",
            "response.bandwidth = '11 GHz': must be below the centre frequency",
        ),
        ("response.order", 0, "response.order = 0: must be an integer in 1..15"),
        ("response.order", 16, "response.order = 16: must be an integer in 1..15"),
        (
            "response.ripple_db",
            -0.1,
            "response.ripple_db = -0.1: outside the allowed range (0, 10]",
        ),
        ("response.ripple_db", float("nan"), "response.ripple_db = nan: must be finite"),
        (
            "response.family",
            "elliptic",
            "response.family = 'elliptic': must be one of 'chebyshev', 'butterworth'",
        ),
        ("response.colour", "red", "response.colour = 'red': unknown key"),
        ("response.z_ref", "50", "response.z_ref = '50': must have a unit of impedance"),
        (
            "medium.kind",
            "coax",
            "medium.kind = 'coax': must be one of 'microstrip', 'stripline', 'ideal'",
        ),
        ("medium.eps_r", 0.5, "medium.eps_r = 0.5: outside the allowed range [1, 100]"),
        ("medium.height", "0 mm", "medium.height = '0 mm': outside the allowed range (0, 0.1] m"),
        (
            "medium.loss_tangent",
            -1e-3,
            "medium.loss_tangent = -0.001: outside the allowed range [0, 0.1)",
        ),
        (
            "medium.metal_thickness",
            "0.2 mm",
            "medium.metal_thickness = '0.2 mm': outside the allowed range [0, 0.00015875] m",
        ),
        (
            "medium.conductivity",
            "5 ohm",
            "medium.conductivity = '5 ohm': must have a unit of conductivity",
        ),
        ("fab.min_gap", "-5 um", "fab.min_gap = '-5 um': outside the allowed range (0, 1] m"),
        ("fab.min_gap", _DELETE, "missing required key fab.min_gap"),
        ("coupling.external", "probe", "coupling.external = 'probe': must be one of 'gap', 'tap'"),
        ("models.gap", "mine", "models.gap = 'mine': must be one of"),
        (
            "mask.passband_return_loss_db",
            0,
            "mask.passband_return_loss_db = 0: outside the allowed range (0, 60]",
        ),
        (
            "mask.stopband",
            [{"start": "10 GHz", "stop": "10.6 GHz", "rejection_db": 30}],
            "overlaps the passband 10.35-10.65 GHz",
        ),
        (
            "mask.stopband",
            [{"start": "12 GHz", "stop": "11 GHz", "rejection_db": 30}],
            "mask.stopband[0].stop = '11 GHz': outside the allowed range (1.2e+10, inf) Hz",
        ),
        (
            "mask.stopband",
            [{"start": "12 GHz", "stop": "13 GHz"}],
            "missing required key mask.stopband[0].rejection_db",
        ),
        ("mask.stopband", "none", "mask.stopband = 'none': must be an array of tables"),
    ],
)
def test_bad_problem_messages(key, value, message):
    d = copy.deepcopy(BASE)
    _set(d, key, value)
    with pytest.raises(ProblemError) as exc:
        parse_problem(d, "x.toml")
    assert message in str(exc.value)


def test_missing_tables_and_exclusive_keys():
    d = copy.deepcopy(BASE)
    del d["mask"]
    with pytest.raises(ProblemError, match=r"missing required table \[mask\]"):
        parse_problem(d, "x.toml")
    d = copy.deepcopy(BASE)
    d["response"]["fractional_bandwidth"] = 0.03
    with pytest.raises(
        ProblemError, match="needs exactly one of bandwidth or fractional_bandwidth"
    ):
        parse_problem(d, "x.toml")
    d = copy.deepcopy(BASE)
    del d["response"]["order"]
    d["mask"]["stopband"] = []
    with pytest.raises(ProblemError, match=r"response\.order is missing and there is no"):
        parse_problem(d, "x.toml")


def test_unreadable_files(tmp_path):
    with pytest.raises(ProblemError, match="cannot be read"):
        load_problem(tmp_path / "absent.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("name = \n")
    with pytest.raises(ProblemError, match="is not valid TOML"):
        load_problem(bad)


def test_resonator_width_defaults_to_free_and_takes_feed():
    assert parse_problem(BASE, "x.toml").free_widths
    d = copy.deepcopy(BASE)
    d["resonators"] = {"width": "feed"}
    p = parse_problem(d, "x.toml")
    assert p.resonator_width == "feed" and not p.free_widths


def test_resonator_width_refused_for_the_ideal_medium():
    d = copy.deepcopy(BASE)
    d["medium"] = {"kind": "ideal"}
    del d["fab"], d["models"]
    d["resonators"] = {"width": "feed"}
    with pytest.raises(ProblemError, match=r"resonators.width = 'feed': does not apply"):
        parse_problem(d, "x.toml")


def _unit_strings():
    import re
    import tomllib

    found: set[str] = set()

    def walk(x):
        if isinstance(x, dict):
            for v in x.values():
                walk(v)
        elif isinstance(x, list):
            for v in x:
                walk(v)
        elif isinstance(x, str) and re.match(r"\s*[-+0-9.]", x):
            found.add(x)

    for p in sorted((Path(__file__).parent.parent / "problems").rglob("*.toml")):
        walk(tomllib.loads(p.read_text()))
    return sorted(found)


def test_plain_unit_strings_read_exactly_as_pint_reads_them():
    """The fast reader of plain SI strings gives pint's value to the last bit, on every unit
    string of the bundled problems and studies and on a few more spellings."""
    import pint

    from refine.spec.problem import plain_si

    ureg = pint.UnitRegistry()
    kinds = {"frequency": "Hz", "length": "m", "impedance": "ohm", "conductivity": "S/m"}
    strings = [*_unit_strings(), "2.4GHz", "25 um", "25 µm", ".5 mm", "1e-3 m", "3 cm", "75 Ω"]
    read = 0
    for text in strings:
        for kind, si in kinds.items():
            x = plain_si(text, kind)
            if x is not None:
                assert x == ureg.Quantity(text.replace("Ω", "ohm")).to(si).magnitude, text
                read += 1
    assert read >= 40


@pytest.mark.parametrize(
    "text, kind",
    [
        ("20 mil", "length"),
        ("0.025 in", "length"),
        ("50 Ohm", "impedance"),
        ("1 ms", "length"),
        ("3 GHz + 10 MHz", "frequency"),
        ("nan GHz", "frequency"),
        ("5.8 MS/m", "conductivity"),
    ],
)
def test_other_unit_strings_are_left_to_pint(text, kind):
    from refine.spec.problem import plain_si

    assert plain_si(text, kind) is None


def test_centre_and_center_are_both_accepted_once(tmp_path):
    """[response] takes either spelling of the centre frequency; both at once is refused."""
    src = (
        Path(__file__).parent.parent / "problems" / "microstrip-x-band-alumina-n3.toml"
    ).read_text()
    assert 'center = "10 GHz"' in src
    import tomllib

    one = tomllib.loads(src.replace('center = "10 GHz"', 'centre = "10 GHz"'))
    assert parse_problem(one, "a.toml").f0 == 10e9
    both = tomllib.loads(src.replace('center = "10 GHz"', 'center = "10 GHz"\ncentre = "10 GHz"'))
    with pytest.raises(ProblemError, match=r"response.centre .* given twice"):
        parse_problem(both, "b.toml")
