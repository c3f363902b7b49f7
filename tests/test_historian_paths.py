"""The back-fill's faster paths give exactly the bytes of the plain Python path.

* ``service.historian_format.format_g10``: Python's ``'%.10g'``, column-wise;
* ``service.historian_arrow``: pyarrow's CSV reader and string kernels for plain chunks,
  with the Python csv path for the rest and whenever pyarrow is not installed;
* ``run_local`` threads: chunks solved concurrently, written in order;
* ``models.derived.alkalinities_eq_kg``: both alkalinities from one setup.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from service import historian, historian_arrow
from service.cli import main
from service.historian_format import format_g10, format_g10_str

from demo_sump import HEADER, MAPPING  # noqa: E402


def _values(seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    n = 20_000
    special = [0.0, -0.0, np.nan, np.inf, -np.inf, 5e-324, 1.7e308, 1e-35, 1e54, 1e22, 1e23, 1e-22,
               9.9999999995, 9.99999999949, 0.0001, 0.000099999999995, 0.00012345, 1e10, 9999999999.5,
               9999999999.4, 123456789012.0, 0.5, 1.5, 2.5, 12345678905.0, 1234567890.5, 1e-5, 1e100, -1e-100]
    return np.concatenate([
        np.array(special),
        rng.normal(size=n),
        10.0 ** rng.uniform(-40, 60, n) * rng.choice([-1.0, 1.0], n),
        np.array([round(v, int(d)) for v, d in zip(rng.uniform(0, 1e6, n), rng.integers(0, 12, n))]),
        rng.integers(-10**12, 10**12, n).astype(float),
        (rng.integers(0, 10**10, n) + 0.5) * 10.0 ** rng.integers(-30, 30, n),  # ties below the 10th digit
        np.frombuffer(rng.bytes(8 * n), dtype=np.float64),  # any bit pattern
    ])


@pytest.mark.parametrize("seed", [0, 1])
def test_format_g10_is_pythons_percent_g(seed: int) -> None:
    x = _values(seed)
    assert format_g10_str(x) == ["%.10g" % v for v in x.tolist()]
    chars, length = format_g10(x)
    assert length.tolist() == [len("%.10g" % v) for v in x.tolist()]
    assert not chars[np.arange(chars.shape[1]) >= length[:, None]].any()  # NUL-padded
    assert format_g10_str(np.array([])) == []


def _export(path: Path, n: int, seed: int, *, irregular: bool) -> None:
    """A sump export with wide-ranging analyses (pH 2–13, hot and cold), bad cells, and
    with ``irregular`` also ragged rows, quoted cells, a CRLF line and a quoted line break."""
    rng = np.random.default_rng(seed)
    lines = []
    for i in range(n):
        vals = [rng.uniform(0, 99), 10 ** rng.uniform(-1, 4.5), 10 ** rng.uniform(-1, 3), 10 ** rng.uniform(-1, 4.5),
                10 ** rng.uniform(-2, 1.5), 10 ** rng.uniform(-2, 2.5), 10 ** rng.uniform(-1, 3.5)]
        cells = ["%.6g" % v for v in vals]
        u = rng.uniform()
        if u < 0.04:
            cells[rng.integers(0, 7)] = ["", "x", "nan", "-1", "1e7", " 12 "][int(rng.integers(0, 6))]
        line = f"2024-01-01T{i % 24:02d}:{i % 60:02d}Z,sump," + ",".join(cells)
        if irregular and rng.uniform() < 0.003:
            line = line.rsplit(",", 1)[0]
        lines.append(line)
    if irregular:
        lines[10] = lines[10].replace(",sump,", ',"sump, east",')
        lines[50] = lines[50].replace(",sump,", ',"a ""q"" b",')
        lines[70] = lines[70] + "\r"
        lines[90] = lines[90].replace(",sump,", ',"two\nlines",')
        lines[120] = ""
    path.write_text(HEADER + "\n" + "\n".join(lines) + "\n", encoding="utf-8")


def _run(src: Path, tmp_path: Path, name: str, capsys: pytest.CaptureFixture[str], *extra: str) -> tuple[int, bytes, str]:
    mapping = tmp_path / "sump.yaml"
    mapping.write_text(MAPPING, encoding="utf-8")
    out = tmp_path / name
    code = main(["solve", str(src), "--mapping", str(mapping), "--output", str(out), "--no-progress", *extra])
    return code, out.read_bytes(), capsys.readouterr().err


@pytest.mark.parametrize("irregular", [False, True], ids=["plain", "irregular"])
def test_arrow_python_and_threads_give_the_same_bytes(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch, irregular: bool
) -> None:
    pytest.importorskip("pyarrow")
    src = tmp_path / "mixed.csv"
    _export(src, 3000, 11, irregular=irregular)
    calls = []
    real = historian_arrow.solve_chunk
    monkeypatch.setattr(historian_arrow, "solve_chunk", lambda *a: calls.append(1) or real(*a))
    runs = {
        "arrow-threads": _run(src, tmp_path, "a.csv", capsys, "--chunk-size", "400", "--threads", "3"),
        "arrow-serial": _run(src, tmp_path, "b.csv", capsys, "--chunk-size", "400", "--threads", "1"),
    }
    assert calls, "plain chunks went to pyarrow"
    monkeypatch.setattr(historian_arrow, "pa", None)  # as without the [parquet] extra
    assert not historian_arrow.usable(b"a,b\n")
    runs["python-serial"] = _run(src, tmp_path, "c.csv", capsys, "--chunk-size", "400", "--threads", "1")
    runs["python-threads"] = _run(src, tmp_path, "d.csv", capsys, "--chunk-size", "400", "--threads", "2")
    (code, data, err), *others = runs.values()
    assert code == 1
    for other in others:
        assert other == (code, data, err)
    text = data.decode("utf-8")
    rows = text.splitlines()
    assert rows[1].split(",")[2] == "1"
    assert any(",true," in r and float(r.split(",")[4]) > 8.3 for r in rows[1:])  # phenolphthalein titrated
    assert "is not a number" in err and "is above the largest accepted value" in err
    if irregular:
        assert '"sump, east"' in text and '"a ""q"" b"' in text
        assert "fields, the header has 9" in err


def test_bad_utf8_stops_with_exit_code_two_on_either_path(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    src = tmp_path / "latin1.csv"
    src.write_bytes((HEADER + "\n2024-03-01T00:00Z,s\xfcmp,14.2,46,40,71,2.0,1.5,48\n").encode("latin-1"))
    assert _run(src, tmp_path, "a.csv", capsys)[0] == 2
    monkeypatch.setattr(historian_arrow, "pa", None)
    assert _run(src, tmp_path, "b.csv", capsys)[0] == 2


def test_arrow_declines_what_its_parser_would_read_differently() -> None:
    pytest.importorskip("pyarrow")
    mapping = historian.parse_mapping(__import__("yaml").safe_load(MAPPING))
    header = HEADER.split(",")
    good = b"2024-03-01T00:00Z,sump,14.2,46,40,71,2.0,1.5,48\n"
    assert historian_arrow.usable(good)
    assert historian_arrow.solve_chunk(good, 1, header, mapping, 1) is not None
    for data in (good.replace(b"sump", b'"sump"'), good.replace(b"sump", b"su\rmp"), good.replace(b"sump", b"su\0mp")):
        assert not historian_arrow.usable(data)
    assert historian_arrow.solve_chunk(good + b"\n" + good, 3, header, mapping, 1) is None  # empty line
    assert historian_arrow.solve_chunk(good + b"a,b\n", 2, header, mapping, 1) is None  # ragged
    assert historian_arrow.solve_chunk(good.replace(b"sump", b"s\xfcmp"), 1, header, mapping, 1) is None
    # the same bytes either way, for a chunk pyarrow takes
    rows = [good.decode().strip().split(",")]
    assert historian_arrow.solve_chunk(good, 1, header, mapping, 7).data == historian.solve_rows(rows, header, mapping, 7).data


def test_split_lines_counts_every_line_once() -> None:
    for data in (b"a\nb\nc\nd\ne\n", b"a\nb\nc\nd\ne", b"a\n", b"a", b"\n\n\n"):
        pieces = list(historian.split_lines(data, 2))
        assert b"".join(p for p, _ in pieces) == data
        assert [n for _, n in pieces] == [len(p.splitlines()) or 1 for p, _ in pieces]


def test_both_alkalinities_equal_the_one_at_a_time_titration() -> None:
    from models.columns import problem_from_columns
    from models.derived import (
        PHENOLPHTHALEIN_ENDPOINT_PH,
        TOTAL_ENDPOINT_PH,
        alkalinities_eq_kg,
        alkalinity_eq_kg,
    )
    from models.solver import solve_balance

    rng = np.random.default_rng(5)
    n = 400
    for model, pco2 in (("davies", None), ("ideal", None), ("extended_debye_huckel", 0.01)):
        batch = problem_from_columns(
            {"Na+": (10 ** rng.uniform(-1, 4, n), "mg/L"), "Cl-": (10 ** rng.uniform(-1, 4, n), "mg/L"),
             "carbonate": (10 ** rng.uniform(-2, 1.5, n), "mmol/L"), "ammonia": (10 ** rng.uniform(-2, 2, n), "mg/L as N")},
            rng.uniform(0, 90, n), model, co2_partial_pressure_atm=pco2,
        )
        p = batch.problem
        st = solve_balance(p)
        ph = np.where(st.status == 0, st.ph, 7.0)
        args = (p, ph, st.log_gamma_species, st.log_gamma_h, st.log_gamma_oh)
        total, phen = alkalinities_eq_kg(*args)
        above = ph > PHENOLPHTHALEIN_ENDPOINT_PH
        assert 0 < above.sum() < n
        assert np.array_equal(total, alkalinity_eq_kg(*args, TOTAL_ENDPOINT_PH))
        assert np.array_equal(phen, np.where(above, alkalinity_eq_kg(*args, PHENOLPHTHALEIN_ENDPOINT_PH), 0.0))
