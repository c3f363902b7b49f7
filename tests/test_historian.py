"""Historian back-fill: ``protolyte solve EXPORT --mapping MAP`` in-process and on Dask.

Demo data: the *Ashcombe Fold dye works* (an invented site), final-effluent sump, with
its historian tags (TT-401 temperature, AI-40x analysers), one sample a minute.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest

from models.equilibrium import solve_many
from models.stream import Entry, StreamSpec
from service.cli import main
from service.historian import Progress, load_mapping, solve_text
from service.historian_dask import plan_csv

from demo_sump import HEADER, MAPPING, UNITS  # noqa: E402
from demo_sump import generate as _generate  # noqa: E402


def _mapping(tmp_path: Path, text: str = MAPPING) -> Path:
    path = tmp_path / "sump.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def _data_lines(paths: list[Path]) -> list[str]:
    lines: list[str] = []
    for p in paths:
        lines.extend(p.read_text(encoding="utf-8").splitlines()[1:])
    return lines


def test_dask_gives_exactly_the_rows_of_the_in_process_path(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    src = tmp_path / "sump.csv"
    _generate(src, 200_000)
    mapping = _mapping(tmp_path)
    local = tmp_path / "local.csv"
    assert main(["solve", str(src), "--mapping", str(mapping), "--output", str(local), "--chunk-size", "20000"]) in (0, 1)
    local_err = capsys.readouterr().err
    parts = tmp_path / "parts"
    code = main([
        "solve", str(src), "--mapping", str(mapping), "--output", str(parts), "--chunk-size", "20000",
        "--partition-rows", "40000", "--dask", "--workers", "2",
    ])
    assert code in (0, 1)
    dask_err = capsys.readouterr().err
    files = sorted(parts.glob("part-*.csv"))
    assert [f.name for f in files] == [f"part-{i:05d}.csv" for i in range(5)]  # one file per partition
    expected = local.read_text(encoding="utf-8").splitlines()
    assert expected[0] == files[0].read_text(encoding="utf-8").splitlines()[0]  # same header
    got = _data_lines(files)
    assert len(got) == 200_000
    assert got == expected[1:]  # exactly the same rows, in order
    assert [line.split(",")[2] for line in got[:3]] == ["1", "2", "3"]
    ok = sum(1 for line in got if line.split(",")[3] == "true")
    assert ok >= 199_900  # a clean export: (nearly) every row solves
    # the same bad-row reports, and the same summary
    assert [l for l in local_err.splitlines() if l.startswith("row ")] == [
        l for l in dask_err.splitlines() if l.startswith("row ")
    ]
    assert "into 5 partition files" in dask_err


BAD_EXPORT = f"""\
{HEADER}
2024-03-01T00:00Z,sump,14.2,46,40,71,2.0,1.5,48
2024-03-01T00:01Z,sump,14.2,46,,71,2.0,1.5,48
2024-03-01T00:02Z,sump,,x,40,-3,2.0,nan,48
2024-03-01T00:03Z,"sump, east",104,46,40,71,2.0,1.5,48
2024-03-01T00:04Z,sump,14.2,46,40,71,2.0,1.5
2024-03-01T00:05Z,sump,14.2,,40,71,2.0,1.5,48
2024-03-01T00:06Z,sump,14.2,46,40,71,2.0,2e6,48
2024-03-01T00:07Z,sump,14.2,90000,40,140000,2.0,1.5,48
2024-03-01T00:08Z,sump,14.2,46,40,71,2.0,1.5,48
"""


def test_bad_rows_are_reported_one_by_one_and_the_rest_written(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    src = tmp_path / "bad.csv"
    src.write_text(BAD_EXPORT, encoding="utf-8")
    out = tmp_path / "out.csv"
    code = main(["solve", str(src), "--mapping", str(_mapping(tmp_path)), "--output", str(out), "--chunk-size", "3"])
    assert code == 1  # some rows failed, the output is complete
    rows = list(csv.DictReader(out.open(encoding="utf-8")))
    assert [r["row"] for r in rows] == [str(i) for i in range(1, 10)]
    assert [r["ok"] for r in rows] == ["true", "true", "false", "false", "false", "false", "false", "false", "true"]
    assert rows[3]["Sample.Point"] == "sump, east"  # passed through, quoted
    for good in (rows[0], rows[1], rows[8]):
        assert 5.0 < float(good["ph"]) < 10.0 and good["error_detail"] == ""
    assert rows[0]["ph"] == rows[8]["ph"]  # same analysis, same answer
    assert rows[1]["ph"] != rows[0]["ph"]  # Ca2+ default 35 mg/L instead of 40
    # no number is written for a bad row
    for bad in rows[2:8]:
        assert bad["ph"] == "" and bad["ionic_strength_mol_l"] == ""
    assert rows[2]["error_field"] == "AI-401.NA; AI-403.CL; AI-405.NH3"
    assert rows[3]["error_field"] == "TT-401.PV" and "104 °C is outside 0–100 °C" in rows[3]["error_detail"]
    assert rows[4]["error_field"] == "(row)" and "has 8 fields, the header has 9" in rows[4]["error_detail"]
    assert rows[5]["error_field"] == "AI-401.NA" and "missing" in rows[5]["error_detail"]
    assert "above the largest accepted value" in rows[6]["error_detail"]
    assert rows[7]["error_type"] == "solve-failed" and "ionic_strength_out_of_range" in rows[7]["error_detail"]
    err = capsys.readouterr().err
    for line in (
        "row 3: column 'AI-401.NA': 'x' is not a number",
        "row 3: column 'AI-403.CL': -3 mg/L is negative",
        "row 3: column 'AI-405.NH3': 'nan' is not a finite number",
        "row 4: column 'TT-401.PV': 104 °C is outside 0–100 °C",
        "row 5: column '(row)': has 8 fields, the header has 9",
        "row 6: column 'AI-401.NA': value is missing (and the mapping gives no default)",
        "row 7: column 'AI-405.NH3': 2e+06 mg/L as N is above the largest accepted value (1e+06 mg/L as N)",
        "row 8: column '(stream)': ionic_strength_out_of_range",
    ):
        assert line in err, err
    assert "3 rows solved, 6 failed" in err


def test_column_path_agrees_with_the_per_stream_solver(tmp_path: Path) -> None:
    """Each written row equals the per-stream solve of its analysis (to the 10 digits written)."""
    src = tmp_path / "sump.csv"
    _generate(src, 40)
    out = tmp_path / "out.csv"
    main(["solve", str(src), "--mapping", str(_mapping(tmp_path)), "--output", str(out)])
    written = list(csv.DictReader(out.open(encoding="utf-8")))
    given = list(csv.DictReader(src.open(encoding="utf-8")))
    mapping = load_mapping(_mapping(tmp_path))
    specs = [
        StreamSpec(
            composition=tuple(Entry(e.name, float(g[e.column]), e.unit) for e in mapping.composition),
            temperature_c=float(g["TT-401.PV"]),
            activity_model="davies",
        )
        for g in given
    ]
    for w, res in zip(written, solve_many(specs)):
        assert w["ok"] == "true"
        assert float(w["ph"]) == pytest.approx(res.ph, rel=1e-9)
        assert float(w["ionic_strength_mol_l"]) == pytest.approx(res.ionic_strength_mol_l, rel=1e-8)
        assert float(w["buffer_capacity_mmol_l_per_ph"]) == pytest.approx(res.buffer_capacity_mmol_l_per_ph, rel=1e-6)
        assert float(w["alkalinity_total_mg_l_as_caco3"]) == pytest.approx(res.alkalinity.total_mg_l_as_caco3, rel=1e-8)
        assert w["warnings"] == " | ".join(res.warnings)


def test_warnings_match_the_per_stream_solver_where_a_fit_is_extrapolated(tmp_path: Path) -> None:
    src = tmp_path / "hot.csv"
    src.write_text(f"{HEADER}\n2024-07-01T12:00Z,sump,98,46,40,71,2.0,1.5,48\n", encoding="utf-8")
    out = tmp_path / "out.csv"
    main(["solve", str(src), "--mapping", str(_mapping(tmp_path)), "--output", str(out)])
    row = next(csv.DictReader(out.open(encoding="utf-8")))
    spec = StreamSpec(
        composition=tuple(Entry(n, v, UNITS[n]) for n, v in
                          zip(UNITS, (46.0, 40.0, 71.0, 2.0, 1.5, 48.0))),
        temperature_c=98.0,
    )
    res = solve_many([spec])[0]
    assert "extrapolated beyond the temperature range" in row["warnings"]
    assert row["warnings"] == " | ".join(res.warnings)


@pytest.mark.parametrize(
    ("edit", "message"),
    [
        (("unit: mg/L as N}", "unit: mg/L as P}"), "'ammonia'"),
        (("name: Na+,", "name: Na,"), "unknown species or system 'Na'"),
        (("unit: mmol/L}", "unit: ppm}"), "'ppm' is not one of"),
        (("AI-406.SO4", "AI-499.XX"), "'AI-499.XX' of the mapping are not in the input"),
        (("activity_model: davies", "activity_model: pitzer"), "activity_model: 'pitzer'"),
        (("timestamp: Timestamp", "stamp: Timestamp"), "unknown mapping key(s) 'stamp'"),
    ],
    ids=["unit-not-for-species", "unknown-name", "unknown-unit", "missing-column", "bad-model", "unknown-key"],
)
def test_a_bad_mapping_stops_before_any_row(
    tmp_path: Path, edit: tuple[str, str], message: str, capsys: pytest.CaptureFixture[str]
) -> None:
    src = tmp_path / "bad.csv"
    src.write_text(BAD_EXPORT, encoding="utf-8")
    mapping = _mapping(tmp_path, MAPPING.replace(*edit))
    out = tmp_path / "out.csv"
    assert main(["solve", str(src), "--mapping", str(mapping), "--output", str(out)]) == 2
    assert message in capsys.readouterr().err


def test_json_mapping_and_dask_without_output_directory(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    import yaml

    doc = yaml.safe_load(MAPPING)
    mj = tmp_path / "sump.json"
    mj.write_text(json.dumps(doc), encoding="utf-8")
    src = tmp_path / "bad.csv"
    src.write_text(BAD_EXPORT, encoding="utf-8")
    out = tmp_path / "out.csv"
    assert main(["solve", str(src), "--mapping", str(mj), "--output", str(out)]) == 1
    assert len(out.read_text(encoding="utf-8").splitlines()) == 10
    assert main(["solve", str(src), "--mapping", str(mj), "--dask"]) == 2
    assert "--output directory" in capsys.readouterr().err


def test_partitions_cover_every_line_once(tmp_path: Path) -> None:
    for tail in ("\n", ""):
        src = tmp_path / "p.csv"
        body = "\n".join(f"r{i},{i}" for i in range(1, 11)) + tail
        src.write_text("a,b\n" + body, encoding="utf-8")
        header, parts = plan_csv(str(src), 4)
        assert header == ["a", "b"]
        assert [p.first_row for p in parts] == [1, 5, 9]
        data = src.read_bytes()
        pieces = [data[p.start:p.end].decode() for p in parts]
        assert "".join(pieces) == body
        assert [len(p.splitlines()) for p in pieces] == [4, 4, 2]


def test_solve_text_numbers_rows_from_first_row(tmp_path: Path) -> None:
    mapping = load_mapping(_mapping(tmp_path))
    header = HEADER.split(",")
    res = solve_text("2024-03-01T00:00Z,sump,14.2,46,40,71,2.0,1.5,48\nt,sump,14.2,q,40,71,2.0,1.5,48\n",
                     header, mapping, 1001, 1)
    assert res.rows == 2
    assert [line.split(",")[2] for line in res.text.splitlines()] == ["1001", "1002"]
    assert [(e.row, e.column) for e in res.errors] == [(1002, "AI-401.NA")]


def test_progress_bar_draws_on_a_terminal_only() -> None:
    import io

    class Tty(io.StringIO):
        def isatty(self) -> bool:
            return True

    tty = Tty()
    bar = Progress(100, "bytes", stream=tty)
    bar.update(100, 2500)
    bar.close()
    assert "100.0%" in tty.getvalue() and "2500 rows" in tty.getvalue()
    plain = io.StringIO()
    quiet = Progress(100, "bytes", stream=plain)
    quiet.update(100, 2500)
    quiet.close()
    assert plain.getvalue() == ""


def test_parquet_export_gives_the_rows_of_the_csv(tmp_path: Path) -> None:
    pa = pytest.importorskip("pyarrow")
    pq = pytest.importorskip("pyarrow.parquet")
    src = tmp_path / "bad.csv"
    src.write_text(BAD_EXPORT.replace("2024-03-01T00:04Z,sump,14.2,46,40,71,2.0,1.5\n", ""), encoding="utf-8")
    given = list(csv.reader(src.open(encoding="utf-8")))
    header, rows = given[0], given[1:]
    table = pa.table({h: [r[i] for r in rows] for i, h in enumerate(header)})
    pq.write_table(table, tmp_path / "bad.parquet", row_group_size=3)
    mapping = str(_mapping(tmp_path))
    out_csv, out_pq = tmp_path / "a.csv", tmp_path / "b.csv"
    assert main(["solve", str(src), "--mapping", mapping, "--output", str(out_csv), "--chunk-size", "3"]) == 1
    assert main(["solve", str(tmp_path / "bad.parquet"), "--mapping", mapping, "--output", str(out_pq), "--chunk-size", "3"]) == 1
    assert out_pq.read_text(encoding="utf-8") == out_csv.read_text(encoding="utf-8")
