"""Result table: fixed columns, exact round trip, torn-tail repair, Parquet; lot discovery;
reading a design's loop parts; the progress line."""

import io
import json
import math
from pathlib import Path

import numpy as np
import pytest

from benchfit.batch.progress import Progress
from benchfit.batch.runner import find_sweeps
from benchfit.batch.table import (
    columns,
    format_row,
    header_line,
    read_table,
    repair_torn_tail,
    write_parquet,
)
from benchfit.batch.task import design_loop_from_dict, unit_id
from benchfit.errors import InputError
from benchfit.fileio import encode_complex

ROW = {"file": "lot/u1.csv", "unit": "SN 1, rev \"B\"", "status": "fail", "reason": "a; b",
       "points": 401, "phase_margin_deg": 0.1 + 0.2, "gain_margin_db": math.inf,
       "closed_loop_stable": False, "fit_converged": True, "param:f_esr_hz": 1.2345678901234567e5,
       "parameters": '{"k": [1.0, null, ""]}'}


def test_round_trip_exact(tmp_path):
    cols = columns(["f_esr_hz"])
    assert cols[0] == "file" and cols[-1] == "param:f_esr_hz"
    p = tmp_path / "r.csv"
    p.write_text(header_line(cols) + format_row(ROW, cols), encoding="utf-8")
    got_cols, rows = read_table(p)
    assert got_cols == cols
    r = rows[0]
    for k, v in ROW.items():
        assert r[k] == v, k  # floats written with repr come back bit for bit
    assert r["error"] is None and r["crossover_hz"] is None


def test_unknown_key_is_a_bug():
    with pytest.raises(KeyError):
        format_row({"file": "x", "nonsense": 1}, columns())


def test_repair_torn_tail(tmp_path):
    cols = columns()
    p = tmp_path / "r.csv"
    good = format_row({"file": "lot/a.csv", "status": "pass"}, cols)
    p.write_text(header_line(cols) + good + "lot/b.csv,b,pa", encoding="utf-8")
    assert repair_torn_tail(p) == len("lot/b.csv,b,pa")
    _, rows = read_table(p)
    assert [r["file"] for r in rows] == ["lot/a.csv"]
    assert repair_torn_tail(p) == 0


def test_read_table_rejects_other_files(tmp_path):
    p = tmp_path / "x.csv"
    p.write_text("freq_hz,re,im\n1,2,3\n")
    with pytest.raises(InputError, match="result table"):
        read_table(p)


def test_parquet_round_trip(tmp_path):
    pd = pytest.importorskip("pandas")
    pytest.importorskip("pyarrow")
    cols = columns(["f_esr_hz"])
    write_parquet(cols, [ROW, {"file": "lot/u2.csv", "status": "error", "error": "bad"}], tmp_path / "r.parquet")
    df = pd.read_parquet(tmp_path / "r.parquet")
    assert list(df.columns) == cols
    assert df["phase_margin_deg"][0] == ROW["phase_margin_deg"]
    assert df["points"].dtype == "Int64" and pd.isna(df["points"][1])
    assert df["closed_loop_stable"][0] == False  # noqa: E712 (nullable boolean)


def test_find_sweeps(tmp_path):
    (tmp_path / "a").mkdir()
    for name in ("a/u2.csv", "u1.csv", "u3.s2p", "notes.md", ".hidden.csv", "results.csv"):
        (tmp_path / name).write_text("x")
    got = find_sweeps(tmp_path, exclude=[tmp_path / "results.csv"])
    assert [p.replace(str(tmp_path), "") for p in got] == ["/a/u2.csv", "/u1.csv", "/u3.s2p"]
    assert find_sweeps(str(tmp_path / "**" / "u*.csv")) == sorted(
        [str(tmp_path / "a" / "u2.csv"), str(tmp_path / "u1.csv")])
    with pytest.raises(InputError, match="no such folder"):
        find_sweeps(tmp_path / "missing")
    with pytest.raises(InputError, match="no sweep files"):
        find_sweeps(str(tmp_path / "*.xyz"))


def test_unit_id():
    assert unit_id("lot/unit_007.csv") == "unit_007"
    assert unit_id("lot/unit_007.csv", {"Serial": " SN-9 "}) == "SN-9"
    assert unit_id("lot/x.csv", {"instrument": "VNA"}) == "x"


def test_design_loop_from_plain_json():
    zpk = {"zeros": encode_complex([-1e4]), "poles": encode_complex([0, -1e6]), "k": 1e5}
    d = design_loop_from_dict({"compensator": {"ideal": zpk, "snapped": zpk},
                               "sensing": {"gain": None, "r_top": 3e3, "r_bottom": 1e3}})
    assert d.sensing_gain == pytest.approx(0.25)
    f = np.array([1e3, 1e5])
    from benchfit.fitting.model import PlantModel
    plant = PlantModel(zeros=[], poles=[-1e3], k=1e3)
    s = 2j * np.pi * f
    expect = 1e3 / (s + 1e3) * 1e5 * (s + 1e4) / (s * (s + 1e6)) * 0.25
    assert np.allclose(d.loop(plant).response(f), expect, rtol=1e-12)
    with pytest.raises(InputError, match="compensator"):
        design_loop_from_dict({"sensing": {"gain": 1}})
    with pytest.raises(InputError, match="sensing"):
        design_loop_from_dict({"compensator": {"snapped": zpk}, "sensing": "x"})


def test_progress_line():
    t = [0.0]
    out = io.StringIO()
    bar = Progress(4, stream=out, every_s=0.0, clock=lambda: t[0])
    for st in ("pass", "fail", "error"):
        t[0] += 2.0
        bar.update(st)
    line = out.getvalue().splitlines()[-1]
    # 3 done in 6 s -> 2 s each, one left -> 0:02 left
    assert line == "batch: 3/4 (75%), 1 failed, 1 errors, 0:06 elapsed, 0:02 left"


def test_lot_skips_what_runs_wrote_and_says_so(tmp_path):
    """A second run over a folder takes the same sweeps as the first: its result tables,
    summary, histograms and other non-sweep files are skipped, each with the reason."""
    from benchfit.batch.lotfiles import find_lot, not_a_sweep

    (tmp_path / "u1.csv").write_text("f,db,deg\n10,1,2\n")
    (tmp_path / "results.csv").write_text("file,unit,status,reason\nu1.csv,u1,pass,\n")
    (tmp_path / "old-results.csv").write_text("\ufefffile,unit,status,reason\n")
    (tmp_path / "summary.json").write_text('{"kind": "lot_summary", "total": 1}')
    (tmp_path / "design.json").write_text('{"kind": "design"}')
    (tmp_path / "hist.png").write_bytes(b"\x89PNG\r\n\x1a\n\0\0")
    (tmp_path / "sweep.json").write_text('{"kind": "frequency_response"}')
    lot = find_lot(tmp_path)
    assert [p.replace(str(tmp_path), "") for p in lot.files] == ["/sweep.json", "/u1.csv"]
    reasons = {p.replace(str(tmp_path) + "/", ""): why for p, why in lot.skipped}
    assert reasons == {"design.json": "a benchfit design", "hist.png": ".png extension",
                       "old-results.csv": "a lot's result table", "results.csv": "a lot's result table",
                       "summary.json": "a benchfit lot summary"}
    line = lot.skipped_line()
    assert line.startswith("skipped 5 file(s) that are not sweeps:") and "hist.png (.png extension)" in line
    # a glob is judged the same way; one file named on its own is always taken
    assert find_lot(str(tmp_path / "*")).files == lot.files
    assert find_lot(tmp_path / "results.csv").files == [str(tmp_path / "results.csv")]
    assert not_a_sweep(tmp_path / "u1.csv") is None


def test_batch_rerun_over_its_own_folder(tmp_path, capsys):
    """`benchfit batch LOT -o LOT/results.csv` run twice: the second run sees the same two
    sweeps (no error row for its own table), and says what it skipped."""
    import shutil

    from benchfit.cli import main

    sample = Path(__file__).resolve().parents[1] / "sample_data" / "ldo_loop.csv"
    lot = tmp_path / "lot"
    lot.mkdir()
    for name in ("u1.csv", "u2.csv"):
        shutil.copy(sample, lot / name)
    args = ["batch", str(lot), "--quantity", "loop", "--summary", str(lot / "summary.json"),
            "--quiet", "--workers", "1", "--json"]
    assert main([*args, "-o", str(lot / "results.csv")]) == 0
    capsys.readouterr()
    assert main([*args, "-o", str(lot / "results2.csv")]) == 0
    out, err = capsys.readouterr()
    run = json.loads(out)["run"]
    assert run["files"] == 2 and json.loads(out)["summary"]["counts"].get("error", 0) == 0
    assert "skipped 1 file(s) that are not sweeps: results.csv (a lot's result table)" in err
