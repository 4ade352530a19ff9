"""From solution to sign-off on the command line: node table and ratings, supply drop in the
summary and the file, limits, export, map and report (pictures decoded, HTML parsed)."""

from __future__ import annotations

import base64
import io
import json
import xml.etree.ElementTree as ET
from html.parser import HTMLParser

import h5py
import numpy as np
import pandas as pd
import pytest
from PIL import Image

import ohmgraph.io as ohmio
from ohmgraph.datasets.generators import grid2d, site_coordinates
from ohmgraph.io.branch_table import write_branch_table
from ohmgraph.io.cli import main
from ohmgraph.io.limits_view import CAUTION

# The loaded ladder of tests/test_drop_limits.py, with ratings: by hand (KCL, Ohm's law; common
# practice) 2 A in Rab (rated 1.5 A: 133 %), 1 A and 1 W in Rbc (rated 0.5 W: 200 %),
# V(b) = 8 V, V(c) = 7 V.
LADDER = """name,kind,from,to,value,max_current,max_power
pad,V,a,0,10,,
Rab,R,a,b,1,1.5,
Rbc,R,b,c,1,,0.5
Ib,I,b,0,1,,
Ic,I,c,0,1,,
"""
NODES = "label,x,y,layer\na,0,0,top\nb,1,0,top\nc,2,0,top\n"


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out + err


@pytest.fixture
def ladder(tmp_path, capsys):
    (tmp_path / "ladder.csv").write_text(LADDER)
    (tmp_path / "nodes.csv").write_text(NODES)
    out = tmp_path / "ladder.h5"
    code, text = run(capsys, "solve", tmp_path / "ladder.csv", "--nodes", tmp_path / "nodes.csv",
                     "-o", out)
    assert code == 0, text
    return out, text


@pytest.fixture(scope="module")
def mesh(tmp_path_factory):
    """A generated 60 x 60 supply mesh (0.9 V, 4 pads, 300 loads) with its node table."""
    folder = tmp_path_factory.mktemp("mesh")
    net = grid2d(60, 60, 0.02, pads=4, loads=300, load_amps=2e-3, supply_volts=0.9, seed=3)
    write_branch_table(folder / "mesh.csv", net)
    x, y, _ = site_coordinates(net.node_labels)
    known = np.isfinite(x)
    pd.DataFrame({"label": net.node_labels[known], "x": x[known], "y": y[known]}).to_csv(
        folder / "mesh_nodes.csv", index=False)
    assert main(["solve", str(folder / "mesh.csv"), "--nodes", str(folder / "mesh_nodes.csv"),
                 "-o", str(folder / "mesh.h5")]) == 0
    return folder


def test_solve_stores_node_table_ratings_and_drop(ladder):
    out, text = ladder
    assert "supply drop" in text and "worst 3 V (30%) at c" in text
    with h5py.File(out) as h5:
        labels = h5["nodes/label"].asstr()[...].tolist()
        c = labels.index("c")
        assert h5["nodes/drop"][c] == pytest.approx(3.0)
        assert h5["nodes/x"][c] == 2.0 and h5["nodes/layer"].asstr()[c] == "top"
        assert np.isnan(h5["nodes/x"][labels.index("0")])
        assert h5["nets/nominal"][0] == pytest.approx(10.0)
        assert h5["nets/worst_drop"][0] == pytest.approx(3.0)
        np.testing.assert_allclose(h5["branches/max_current"][...],
                                   [np.nan, 1.5, np.nan, np.nan, np.nan])
        assert h5["nodes/drop"].attrs["units"] == "V"


def test_show_repeats_the_drop(ladder, capsys):
    code, text = run(capsys, "show", ladder[0])
    assert code == 0 and "worst 3 V (30%) at c" in text


def test_limits_exit_codes_and_order(ladder, capsys):
    out = ladder[0]
    code, text = run(capsys, "limits", out, "--max-drop", "25%")
    assert code == 1
    lines = [line for line in text.splitlines() if "%  " in line]
    assert "power" in lines[0] and "Rbc" in lines[0] and "200.0%" in lines[0]
    assert "current" in lines[1] and "133.3%" in lines[1]
    assert "drop" in lines[2] and "node c" in lines[2] and "120.0%" in lines[2]
    assert CAUTION in text
    code, text = run(capsys, "limits", out, "--max-drop", "3.5V", "--json")
    data = json.loads(text)
    assert code == 1 and data["counts"] == {"drop": 0, "current": 1, "power": 1}
    assert data["caution"] == CAUTION


def test_limits_pass_on_the_divider(tmp_path, capsys):
    (tmp_path / "d.csv").write_text("name,kind,from,to,value\nV1,V,in,0,5\nR1,R,in,mid,2\n"
                                    "R2,R,mid,0,3\n")
    run(capsys, "solve", tmp_path / "d.csv", "-o", tmp_path / "d.h5")
    # V(mid) = 3 V, drop 2 V = 40 % (common practice: Ohm's law)
    assert run(capsys, "limits", tmp_path / "d.h5", "--max-drop", "41%")[0] == 0
    assert run(capsys, "limits", tmp_path / "d.h5", "--max-drop", "39%")[0] == 1
    assert run(capsys, "limits", tmp_path / "d.h5", "--max-drop", "2.1V",
               "--max-power", "3.1")[0] == 0
    assert run(capsys, "limits", tmp_path / "d.h5", "--max-power", "2.9")[0] == 1


def test_export_csv_parquet_and_dataframes(ladder, tmp_path, capsys):
    out = ladder[0]
    code, _ = run(capsys, "export", out, "--nodes", tmp_path / "n.csv",
                  "--branches", tmp_path / "b.parquet")
    assert code == 0
    nodes = pd.read_csv(tmp_path / "n.csv", keep_default_na=False, na_values=[""])
    assert list(nodes.columns) == ["label", "voltage", "net", "drop", "held", "x", "y", "layer"]
    assert nodes.set_index("label").loc["b", "voltage"] == pytest.approx(8.0)
    branches = pd.read_parquet(tmp_path / "b.parquet").set_index("name")
    assert branches.loc["Rab", "current"] == pytest.approx(2.0)
    assert branches.loc["Rbc", "utilisation"] == pytest.approx(2.0)
    frame = ohmio.load_branches(out)
    assert all(type(v) is str for v in frame["name"]) and all(type(v) is str
                                                              for v in frame["from"])
    assert all(type(v) is str for v in ohmio.load_nodes(out)["label"])
    # top 1 resistor by power
    code, _ = run(capsys, "export", out, "--branches", tmp_path / "top.csv", "--top", "1",
                  "--by", "power", "--kind", "R")
    top = pd.read_csv(tmp_path / "top.csv")
    assert code == 0 and top["name"].tolist() == ["Rab"]          # 4 W against 1 W


def _decoded(path) -> np.ndarray:
    return np.asarray(Image.open(path).convert("RGB"))


def _has_colour_bar(pixels: np.ndarray) -> bool:
    """A column in the right fifth of the picture with a long run of distinct colours."""
    width = pixels.shape[1]
    for column in range(int(width * 0.8), width):
        colours = {tuple(p) for p in pixels[:, column]}
        if len(colours) > 100:
            return True
    return False


def test_map_png_and_svg_of_a_mesh(mesh, capsys):
    png = mesh / "drop.png"
    code, text = run(capsys, "map", mesh / "mesh.h5", "-o", png)
    assert code == 0, text
    pixels = _decoded(png)
    assert pixels.shape[0] > 300 and pixels.shape[1] > 400
    assert len(np.unique(pixels.reshape(-1, 3), axis=0)) > 100       # not uniform
    assert _has_colour_bar(pixels)
    svg = mesh / "current.svg"
    assert run(capsys, "map", mesh / "mesh.h5", "-o", svg, "--quantity", "current")[0] == 0
    root = ET.parse(svg).getroot()
    assert root.tag.endswith("svg")
    assert any(e.tag.endswith("image") for e in root.iter())         # the binned grid
    assert "(mA)" in svg.read_text() or "mA" in svg.read_text()


def test_map_without_coordinates_offers_histograms(tmp_path, capsys):
    (tmp_path / "d.csv").write_text("name,kind,from,to,value\nV1,V,in,0,5\nR1,R,in,mid,2\n"
                                    "R2,R,mid,0,3\n")
    run(capsys, "solve", tmp_path / "d.csv", "-o", tmp_path / "d.h5")
    code, text = run(capsys, "map", tmp_path / "d.h5", "-o", tmp_path / "m.png")
    assert code == 2 and "no node coordinates" in text and "--histograms" in text
    assert not (tmp_path / "m.png").exists()
    code, _ = run(capsys, "map", tmp_path / "d.h5", "-o", tmp_path / "h.png", "--histograms")
    pixels = _decoded(tmp_path / "h.png")
    assert code == 0 and len(np.unique(pixels.reshape(-1, 3), axis=0)) > 10


class _Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.images, self.links, self.text, self.tables = [], [], [], 0

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "img":
            self.images.append(attrs)
        if tag == "table":
            self.tables += 1
        for key in ("href", "src"):
            if key in attrs:
                self.links.append(attrs[key])

    def handle_data(self, data):
        self.text.append(data)


def test_report_is_self_contained_html(mesh, capsys):
    out = mesh / "report.html"
    code, text = run(capsys, "report", mesh / "mesh.h5", "-o", out, "--max-drop", "1%")
    assert code == 0, text
    page = _Collector()
    page.feed(out.read_text(encoding="utf-8"))
    words = " ".join(page.text)
    assert all(link.startswith("data:image/png;base64,") for link in page.links)
    assert len(page.images) == 2                                  # drop map and histograms
    for image in page.images:
        data = base64.b64decode(image["src"].split(",", 1)[1])
        picture = Image.open(io.BytesIO(data))
        assert picture.format == "PNG" and picture.size[0] > 400
    for needle in ("Provenance", "Evidence", "relative residual", "power balance",
                   "Supply drop", "Limits", "mesh.csv", CAUTION):
        assert needle in words
    assert page.tables >= 4


def test_report_of_the_ladder_lists_violations(ladder, tmp_path, capsys):
    out = tmp_path / "ladder.html"
    assert run(capsys, "report", ladder[0], "-o", out)[0] == 0
    page = _Collector()
    page.feed(out.read_text(encoding="utf-8"))
    words = " ".join(page.text)
    assert "2 limit(s) exceeded" in words and "Rbc" in words and "200.0%" in words


def test_solve_json_thresholds_and_nominal(tmp_path, capsys):
    (tmp_path / "ladder.csv").write_text(LADDER)
    # drops of b and c are 2 V and 3 V below 10 V (the ladder above): over 25 % and over 2.5 V
    # only c; with a 12 V nominal imposed they are 4 V and 5 V, both over
    code, text = run(capsys, "solve", tmp_path / "ladder.csv", "-o", tmp_path / "a.h5", "--json",
                     "--drop-thresholds", "25%,2.5V")
    net0 = json.loads(text)["supply_drop"]["nets_shown"][0]
    assert code == 0 and net0["over"] == {"25%": 1, "2.5 V": 1}
    assert net0["worst_node"] == "c" and net0["worst_drop_V"] == pytest.approx(3.0)
    code, text = run(capsys, "solve", tmp_path / "ladder.csv", "-o", tmp_path / "b.h5", "--json",
                     "--drop-thresholds", "2.5V", "--nominal", "12")
    net0 = json.loads(text)["supply_drop"]["nets_shown"][0]
    assert net0["over"] == {"2.5 V": 2} and net0["worst_drop_V"] == pytest.approx(5.0)
    # limits reads the stored nominal back
    code, text = run(capsys, "limits", tmp_path / "b.h5", "--max-drop", "4.5V", "--json")
    assert json.loads(text)["counts"]["drop"] == 1
