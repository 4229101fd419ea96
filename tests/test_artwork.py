"""The fab artwork: one clean set of copper polygons, etch compensation, and every format read
back by a reader that is not the writer (gdstk's own reader for GDSII, pygerber and gerbonara's
parser for Gerber, kiutils' KiCad parser, ezdxf's audit for DXF R12)."""

from __future__ import annotations

import itertools
import warnings

import ezdxf
import numpy as np
import pytest
from conftest import problem_path

from refine.circuit.layout import Layout
from refine.outputs import artwork
from refine.outputs.artwork import ArtworkError
from refine.spec.coupling import Coupling

TAP = Layout(
    Coupling.TAP,
    600e-6,
    (600e-6, 600e-6, 600e-6),
    (80e-6, 80e-6),
    (5.2e-3, 5.1e-3, 5.2e-3),
    (1.9e-3, 1.9e-3),
)
GAP = Layout(
    Coupling.GAP,
    600e-6,
    (600e-6, 700e-6, 600e-6),
    (30e-6, 200e-6, 200e-6, 30e-6),
    (5.0e-3, 5.1e-3, 5.0e-3),
)

NOMINAL_ONLY = 5  # the design exit code for a mask met on the nominal model only


def _polygons(art):
    from shapely import Polygon

    return [Polygon(p) for p in art.copper]


@pytest.mark.parametrize("lay", [TAP, GAP], ids=["tap", "gap"])
@pytest.mark.parametrize("bias", [0.0, 5e-6])
def test_no_two_copper_shapes_touch_or_overlap(lay, bias):
    art = artwork.artwork(lay, bias)
    polys = _polygons(art)
    # a tapped feed is merged with its resonator: one piece per resonator; gap coupling: the
    # feeds and resonators are apart
    assert len(polys) == (lay.order if lay.external is Coupling.TAP else lay.order + 2)
    assert all(p.is_valid and p.area > 0 for p in polys)
    for a, b in itertools.combinations(polys, 2):
        assert a.distance(b) > 0.0  # not touching, not overlapping


def test_etch_bias_draws_strips_wider_and_gaps_narrower():
    b = 5e-6
    plain, biased = artwork.artwork(GAP, 0.0), artwork.artwork(GAP, b)
    for p0, p1 in zip(_polygons(plain), _polygons(biased), strict=True):
        x0, y0, x1, y1 = p0.bounds
        u0, v0, u1, v1 = p1.bounds
        assert (u1 - u0) - (x1 - x0) == pytest.approx(2 * b, abs=2e-9)
        assert (v1 - v0) - (y1 - y0) == pytest.approx(2 * b, abs=2e-9)
    pieces = sorted(_polygons(biased), key=lambda p: p.bounds[0])
    drawn = [b_.bounds[0] - a.bounds[2] for a, b_ in itertools.pairwise(pieces)]
    np.testing.assert_allclose(drawn, np.array(GAP.gaps) - 2 * b, atol=2e-9)


def test_an_etch_bias_that_closes_a_gap_is_refused():
    with pytest.raises(ArtworkError, match=r"etch_bias = 15 um per edge closes the 30 um gap"):
        artwork.artwork(GAP, 15e-6)


def test_gds_reads_back_in_gdstk(tmp_path):
    import gdstk

    art = artwork.artwork(TAP, 3e-6)
    artwork.write_gds(tmp_path / "a.gds", art)
    lib = gdstk.read_gds(str(tmp_path / "a.gds"))
    cell = lib.top_level()[0]
    copper = [p for p in cell.polygons if p.layer == artwork.GDS_LAYERS["copper"]]
    assert len(copper) == len(art.copper)
    got = sorted(tuple(np.round(np.ravel(p.bounding_box()), 4)) for p in copper)
    want = sorted(
        tuple(
            np.round(
                [
                    min(x for x, _ in q) * 1e6,
                    min(y for _, y in q) * 1e6,
                    max(x for x, _ in q) * 1e6,
                    max(y for _, y in q) * 1e6,
                ],
                4,
            )
        )
        for q in art.copper
    )
    assert got == want  # micrometres
    assert {lb.text for lb in cell.labels} == {"port 1", "port 2"}
    assert any(p.layer == artwork.GDS_LAYERS["outline"] for p in cell.polygons)


def test_gerber_reads_back_in_pygerber_and_gerbonara(tmp_path):
    from gerbonara import GerberFile
    from pygerber.gerberx3.api.v2 import GerberFile as PyGerber

    art = artwork.artwork(GAP, 2e-6)
    paths = artwork.write_gerber(tmp_path, "f", art, "a filter")
    copper = tmp_path / "f-copper.gbr"
    assert copper in paths
    text = copper.read_text()
    assert "TF.FileFunction,Copper,L1,Top*" in text and "TF.FilePolarity,Positive*" in text
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # pygerber's use of pyparsing
        info = PyGerber.from_str(text).parse().get_info()
    x0, y0, x1, y1 = art.bounds()
    assert float(info.min_x_mm) == pytest.approx(x0 * 1e3, abs=1e-5)
    assert float(info.max_x_mm) == pytest.approx(x1 * 1e3, abs=1e-5)
    assert float(info.width_mm) == pytest.approx((x1 - x0) * 1e3, abs=1e-5)
    assert float(info.height_mm) == pytest.approx((y1 - y0) * 1e3, abs=1e-5)
    g = GerberFile.open(copper)
    assert len(g.objects) == len(art.copper)
    outline = (tmp_path / "f-outline.gbr").read_text()
    assert "TF.FileFunction,Profile,NP*" in outline


def test_kicad_footprint_reads_back_in_kiutils(tmp_path):
    from kiutils.footprint import Footprint

    art = artwork.artwork(TAP)
    artwork.write_kicad_footprint(tmp_path / "f.kicad_mod", art, "refine_test", "a filter")
    fp = Footprint.from_file(str(tmp_path / "f.kicad_mod"))
    assert len(fp.pads) == len(art.copper)
    assert sorted(p.number for p in fp.pads) == ["", "1", "2"][: len(fp.pads)] or sorted(
        p.number for p in fp.pads if p.number
    ) == ["1", "2"]
    assert all(p.shape == "custom" and p.layers == ["F.Cu"] for p in fp.pads)
    edges = [g for g in fp.graphicItems if getattr(g, "layer", None) == "Edge.Cuts"]
    assert len(edges) == 4
    # a pad's polygon, moved to the pad's position, is the copper (y mirrored, millimetres)
    pad = fp.pads[0]
    xs = [pad.position.X + c.X for c in pad.customPadPrimitives[0].coordinates]
    assert min(xs) == pytest.approx(min(x for x, _ in art.copper[0]) * 1e3, abs=1e-6)


def test_dxf_r12_passes_ezdxf_audit(tmp_path):
    art = artwork.artwork(GAP, 1e-6)
    artwork.write_dxf_artwork(tmp_path / "f.dxf", art, "R12", "a filter")
    doc = ezdxf.readfile(tmp_path / "f.dxf")
    assert doc.dxfversion == "AC1009"  # R12
    assert not doc.audit().has_errors
    copper = [e for e in doc.modelspace() if e.dxf.layer == "copper"]
    assert len(copper) == len(art.copper) and all(e.dxftype() == "POLYLINE" for e in copper)


def test_design_out_writes_the_artwork_with_the_problems_etch_bias(tmp_path):
    from refine.cli import main

    src = problem_path("microstrip-x-band-alumina-n3").read_text()
    src = src.replace("[fab]\n", '[fab]\netch_bias = "3 um"\n', 1)
    prob = tmp_path / "p.toml"
    prob.write_text(src)
    out = tmp_path / "out"
    assert (
        main(["design", str(prob), "--out", str(out), "--dxf-r12"]) == NOMINAL_ONLY
    )  # met, not at every model corner
    doc = ezdxf.readfile(out / "layout.dxf")
    assert doc.dxfversion == "AC1009"
    report = (out / "report.md").read_text()
    assert "etch bias of 3 µm per edge" in report and "drawn gaps" in report
    from refine.outputs import export

    lay = export.read_layout(out / "layout.json")  # as built
    copper = sorted(
        (min(p[0] for p in e.points()), max(p[0] for p in e.points()))
        for e in doc.modelspace()
        if e.dxf.layer == "copper"
    )
    drawn = [b0 - a1 for (_, a1), (b0, _) in itertools.pairwise(copper)]
    np.testing.assert_allclose(drawn, (np.array(lay.gaps) - 6e-6) * 1e3, atol=1e-6)
