"""The oxygen front ends: the command line, the figures and HTML report, the interactive sheet
and the notebook (which only imports and calls the package)."""

import html as html_text
from pathlib import Path

import numpy as np
import pytest

import circlesim as cs
from circlesim.base.cautions import CAUTION
from circlesim.cli import main
from circlesim.oxygen.flow_map import oxygen_map
from circlesim.oxygen.setup import Setup

ROOT = Path(__file__).resolve().parents[1]
NOTEBOOK = ROOT / "notebooks" / "oxygen_at_minimal_flow.ipynb"
SCENARIO = ROOT / "scenarios" / "flow_reduction_sevoflurane.toml"


def test_cli_prints_the_table_and_writes_the_map(tmp_path, capsys):
    html = tmp_path / "map.html"
    code = main(["oxygen", "--weight", "80", "--age", "70", "--flows", "0.5,1,2",
                 "--threshold", "0.3", "--html", str(html), "--duration", "60"])
    out = capsys.readouterr().out
    assert code == 0
    assert "Lowest fresh-gas O2 that keeps FIO2 >= 0.30" in out
    assert "80 kg" in out and "CAUTION" in out
    rows = [line for line in out.splitlines() if line.strip().startswith(("0.50", "1.00",
                                                                         "2.00"))]
    assert len(rows) == 3
    text = html.read_text(encoding="utf-8")
    assert "Oxygen at minimal flow" in text and "Map: O2 in air" in text
    assert "Map: O2 in N2O" in text and html_text.escape(CAUTION) in text
    # no overwrite without --overwrite: a free name is chosen
    main(["oxygen", "--flows", "1,2", "--steady-only", "--html", str(html)])
    assert "written to " + str(tmp_path / "map-1.html") in capsys.readouterr().out
    assert html.read_text(encoding="utf-8") == text
    main(["oxygen", "--flows", "1,2", "--steady-only", "--html", str(html), "--overwrite"])
    assert html.read_text(encoding="utf-8") != text


def test_cli_with_a_scenario_shows_the_plan_and_its_warnings(tmp_path, capsys):
    code = main(["oxygen", str(SCENARIO), "--flows", "0.5,1", "--steady-only", "--carrier",
                 "air", "--threshold", "0.5", "--html", str(tmp_path / "s.html")])
    out = capsys.readouterr().out
    assert code == 0
    assert "== Plan:" in out and "Warnings:" in out
    assert "Inspired O2 fraction falls below 0.50" in out  # an unsafe plan, still shown
    assert "Oxygen course of the plan" in (tmp_path / "s.html").read_text(encoding="utf-8")


@pytest.mark.parametrize("args, message", [
    (["--threshold", "0.1"], "fio2_threshold must be a number from 0.21 to 1; got 0.1"),
    (["--flows", "a,b"], "--flows must be comma-separated"),
    (["--flows", "-1"], "fgf_l_min[0] must be a number from 0.1 to 20 L/min; got -1"),
    (["--leak", "900", "--flows", "0.5,1"], "leak_ml_min must be smaller than the fresh gas"),
])
def test_cli_bad_input(tmp_path, capsys, args, message):
    code = main(["oxygen", "--steady-only", "--html", str(tmp_path / "x.html"), *args])
    assert code == 2
    assert message in capsys.readouterr().err
    assert not (tmp_path / "x.html").exists()


def test_map_figure_has_the_threshold_contour(adult):
    from circlesim.reports.oxygen_figures import map_figure

    m = oxygen_map(Setup(adult), [0.5, 1.0, 2.0], [0.4, 0.6, 0.8], fio2_threshold=0.3,
                   duration_min=40.0)
    assert m.steady_fio2.shape == (3, 3) and m.minutes_below.shape == (3, 3)
    fig = map_figure(m)
    contours = [t for t in fig.data if t.type == "contour"]
    assert contours and all(c.contours.start == 0.3 == c.contours.end for c in contours)
    heatmaps = [t for t in fig.data if t.type == "heatmap"]
    assert len(heatmaps) == 2
    # more O2 and more flow never spend more time below the threshold
    assert np.all(np.diff(m.minutes_below, axis=0) <= 1e-9)
    assert np.all(np.diff(m.minutes_below, axis=1) <= 1e-9)
    assert len(m.frame()) == 9


def test_sheet_controls_update_the_figures_and_warnings(adult):
    from circlesim.app.oxygen_sheet import OxygenSheet

    sheet = OxygenSheet(Setup(adult))
    assert sheet.map is not None and sheet.course is not None
    assert "Inspired O2 fraction falls below" in sheet.warnings.value  # 0.5 L/min, 50 % O2
    before = np.array(sheet.course.data[0].y)
    sheet.fgf.value = 2.0
    assert "No alert rule fires" in sheet.warnings.value
    assert not np.allclose(np.array(sheet.course.data[0].y), before)
    sheet.threshold.value = 1.5
    assert "fio2_threshold must be a number from 0.21 to 1" in sheet.error.value
    sheet.threshold.value = 0.35
    assert sheet.error.value == ""
    sheet.carrier.value = "n2o"
    assert sheet.refresh_map()
    assert sheet.last_map.carrier == "n2o"
    assert "n2o_plan_o2_pct" in sheet.table.value
    assert html_text.escape(CAUTION) in sheet.widget.children[1].value


def test_report_without_plan_columns(adult, tmp_path):
    from circlesim.oxygen.minimum import safe_fraction_table
    from circlesim.reports.oxygen import write_oxygen_report

    setup = Setup(adult, cs.Circuit(leak_ml_min=100.0))
    table = safe_fraction_table(setup, [0.5, 1.0], duration_min=None)
    m = oxygen_map(setup, [0.5, 1.0], [0.5, 0.9], with_plan=False)
    path = write_oxygen_report(tmp_path / "r.html", setup, table, [m], fio2_threshold=0.3)
    text = path.read_text(encoding="utf-8")
    assert "leak 100 mL/min" in text
    with pytest.raises(FileExistsError):
        write_oxygen_report(path, setup, table, [m], fio2_threshold=0.3)
