"""``loopwarden batch``: inputs, output names, folder safety, summaries, workers, progress.

Loops (invented for these tests): K/(s(s+1)) has PM = 90° − atan(ωc) with
ωc·√(1 + ωc²) = K [derived], checked with control.stability_margins [python-control];
K = 1 gives PM 51.83° (the ζ = 0.5 row of REFERENCE_VALUES.md [derived]), so K ≤ 1
passes the general set.  The Ogata plant
1/(s(s+1)(0.5s+1)) with gain 5 and no lag is closed-loop unstable [memory, matched].
"""

from __future__ import annotations

import io
import json
import subprocess
import sys
import textwrap
from pathlib import Path

import control as ct
import pandas as pd
import pytest

from loopwarden import batch
from loopwarden.batch import COLUMNS, collect_inputs, output_names, run_batch
from loopwarden.cli import main
from loopwarden.errors import UsageError

DATE = "2025-09-01"


def design_text(k: float, name: str, poles: str = "0.0, -1.0", gain: float = 1.0) -> str:
    return textwrap.dedent(f"""
        [design]
        name = "{name}"
        [plant]
        zpk = {{ zeros = [], poles = [{poles}], gain = {gain} }}
        [[controller]]
        type = "gain"
        k = {k}
        """)


def put(folder: Path, name: str, text: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def batch_main(*args: str) -> int:
    return main(["batch", *args, "--date", DATE, "--quiet"])


# --------------------------------------------------------------------------- inputs
def test_folder_inputs_are_the_tomls_inside_sorted(tmp_path: Path) -> None:
    src = tmp_path / "src"
    for name in ("b.toml", "a.toml", "c.txt"):
        put(src, name, design_text(1.0, name))
    put(src / "sub", "deeper.toml", design_text(1.0, "deeper"))
    extra = put(tmp_path, "z.toml", design_text(1.0, "z"))
    found = collect_inputs([src, extra, src / "a.toml"])     # a.toml named twice
    assert [p.name for p in found] == ["a.toml", "b.toml", "z.toml"]
    with pytest.raises(UsageError, match="neither a design file nor a folder"):
        collect_inputs([tmp_path / "missing.toml"])
    (tmp_path / "empty").mkdir()
    with pytest.raises(UsageError, match="no design files"):
        collect_inputs([tmp_path / "empty"])


def test_shared_stems_get_distinct_names() -> None:
    paths = [Path("x/axis.toml"), Path("y/axis.toml"), Path("y/AXIS.toml"),
             Path("axis-2.toml"), Path("z/summary.toml")]
    assert output_names(paths) == ["axis.json", "axis-2.json", "AXIS-3.json",
                                   "axis-2-2.json", "summary.json"]


def test_two_inputs_with_one_stem_write_two_reviews(tmp_path: Path) -> None:
    a = put(tmp_path / "line1", "pump.toml", design_text(1.0, "pump line 1"))
    b = put(tmp_path / "line2", "pump.toml", design_text(0.5, "pump line 2"))
    out = tmp_path / "out"
    assert batch_main(str(a), str(b), "--out", str(out)) == 0
    names = {p.name: json.loads(p.read_text())["design"]["name"] for p in out.glob("*.json")}
    assert names == {"pump.json": "pump line 1", "pump-2.json": "pump line 2"}


# --------------------------------------------------------------------------- exit codes
def test_exit_codes(tmp_path: Path) -> None:
    good = put(tmp_path / "in", "good.toml", design_text(1.0, "good"))      # PM 51.8°
    bad = put(tmp_path / "in", "bad.toml", design_text(5.0, "unstable", "0.0, -1.0, -2.0",
                                                       2.0))
    broken = put(tmp_path / "in2", "broken.toml", "[design]\nname = 3\n")
    assert batch_main(str(good), "--out", str(tmp_path / "o1")) == 0
    assert batch_main(str(good), str(bad), "--out", str(tmp_path / "o2")) == 1
    assert batch_main(str(good), str(bad), str(broken), "--out", str(tmp_path / "o3")) == 2
    # bad arguments: nothing written at all
    assert batch_main(str(good), "--out", str(tmp_path / "o4"), "--rules", "nosuch") == 2
    assert batch_main(str(good), "--out", str(tmp_path / "o5"), "--jobs", "0") == 2
    assert not (tmp_path / "o4").exists() and not (tmp_path / "o5").exists()


def test_internal_error_in_one_design_is_reported_and_exit_3(tmp_path: Path,
                                                              monkeypatch) -> None:
    import loopwarden.review_run as rr

    real = rr.run_review

    def flaky(design, *args, **kwargs):
        if design.name == "trips":
            raise RuntimeError("simulated bug")
        return real(design, *args, **kwargs)

    monkeypatch.setattr(rr, "run_review", flaky)
    src = tmp_path / "in"
    put(src, "a.toml", design_text(1.0, "fine"))
    put(src, "b.toml", design_text(1.0, "trips"))
    result = run_batch(collect_inputs([src]), tmp_path / "out", jobs=1, date=DATE)
    assert [o.verdict for o in result.outcomes] == ["pass", "internal"]
    assert "RuntimeError: simulated bug" in (result.outcomes[1].error or "")
    assert result.exit_code == 3
    assert (tmp_path / "out" / "a.json").exists() and not (tmp_path / "out" / "b.json").exists()


# --------------------------------------------------------------------------- folder safety
def test_refuses_to_overwrite_a_file_it_did_not_write(tmp_path: Path) -> None:
    src = tmp_path / "in"
    put(src, "axis.toml", design_text(1.0, "axis"))
    out = tmp_path / "out"
    mine = put(out, "axis.json", '{"my": "notes"}\n')
    assert batch_main(str(src), "--out", str(out)) == 2
    assert mine.read_text() == '{"my": "notes"}\n'
    assert sorted(p.name for p in out.iterdir()) == ["axis.json"]      # nothing written
    # a user's summary.csv is protected the same way
    mine.unlink()
    put(out, "summary.csv", "a,b\n1,2\n")
    assert batch_main(str(src), "--out", str(out)) == 2
    assert (out / "summary.csv").read_text() == "a,b\n1,2\n"


def test_refuses_an_output_that_is_an_input(tmp_path: Path) -> None:
    # a design file that happens to be called .json, reviewed into its own folder
    src = put(tmp_path, "axis.json", design_text(1.0, "axis"))
    assert batch_main(str(src), "--out", str(tmp_path)) == 2
    assert src.read_text() == design_text(1.0, "axis")


def test_rerun_into_its_own_folder_and_stale_review_removed(tmp_path: Path) -> None:
    src = tmp_path / "in"
    a = put(src, "a.toml", design_text(1.0, "a"))
    put(src, "b.toml", design_text(0.5, "b"))
    out = tmp_path / "out"
    assert batch_main(str(src), "--out", str(out)) == 0
    first = (out / "summary.csv").read_bytes()
    assert batch_main(str(src), "--out", str(out)) == 0          # our own files: replaced
    assert (out / "summary.csv").read_bytes() == first            # and deterministic
    a.write_text("[design\n", encoding="utf-8")                   # a breaks
    assert batch_main(str(src), "--out", str(out)) == 2
    assert not (out / "a.json").exists() and (out / "b.json").exists()


def test_out_is_a_file(tmp_path: Path) -> None:
    src = put(tmp_path, "a.toml", design_text(1.0, "a"))
    put(tmp_path, "out", "x")
    assert batch_main(str(src), "--out", str(tmp_path / "out")) == 2


# --------------------------------------------------------------------------- contents
FLEET = {"axis_soft": 0.3, "axis_mid": 0.6, "axis_stiff": 1.0, "pump_1": 0.4, "pump_2": 0.45,
         "pump_3": 0.5, "pump_4": 0.55}
GIMBAL_K = 0.3      # 0.3/(s(s+0.5)) for the cold bearing: ζ = 0.456, PM about 48°


@pytest.fixture(scope="module")
def fleet(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """Eight designs reviewed in two worker processes (at least four designs each)."""
    tmp = tmp_path_factory.mktemp("fleet")
    src = tmp / "designs"
    for stem, k in FLEET.items():
        put(src, f"{stem}.toml", design_text(k, stem))
    put(src, "gimbal.toml", design_text(GIMBAL_K, "gimbal") + textwrap.dedent("""
        [[plant.variants]]
        name = "cold bearing"
        zpk = { zeros = [], poles = [0.0, -0.5], gain = 1.0 }
        """))
    out = tmp / "out"
    assert batch_main(str(src), "--out", str(out), "--jobs", "2") == 0
    return {"src": src, "out": out, "tmp": tmp}


def test_summary_csv_columns_and_values(fleet) -> None:
    frame = pd.read_csv(fleet["out"] / "summary.csv")
    assert tuple(frame.columns) == COLUMNS
    assert len(frame) == 9                                # gimbal has two variants
    assert list(frame["file"].map(lambda p: Path(p).name)) == sorted(
        [f"{stem}.toml" for stem in FLEET] + ["gimbal.toml"] * 2)
    for _, row in frame.iterrows():
        pole = -0.5 if row["variant"] == "cold bearing" else -1.0
        k = {**FLEET, "gimbal": GIMBAL_K}[row["design"]]
        gm, pm, *_ = ct.stability_margins(ct.tf([k], [1.0, -pole, 0.0]))
        assert row["phase_margin_deg"] == pytest.approx(pm, abs=1e-3)      # [python-control]
        assert row["gain_margin_db"] == float("inf") and gm == float("inf")  # no phase crossing
        assert row["kv"] == pytest.approx(k / -pole)    # Kv = lim s·L(s) [derived]
        assert row["system_type"] == 1 and row["closed_loop_stable"]
    assert frame["error"].isna().all()
    assert str(frame["n_fail"].dtype) == "int64"          # whole numbers stay whole


def test_json_per_design_is_the_review_json(fleet) -> None:
    one = fleet["tmp"] / "one.json"
    assert main(["review", str(fleet["src"] / "axis_mid.toml"), "--json", str(one),
                 "--date", DATE, "--quiet"]) in (0, 1)
    assert (fleet["out"] / "axis_mid.json").read_bytes() == one.read_bytes()


def test_parallel_and_serial_give_the_same_files(fleet) -> None:
    serial = fleet["tmp"] / "serial"
    assert batch_main(str(fleet["src"]), "--out", str(serial), "--jobs", "1") == 0
    for p in sorted(fleet["out"].iterdir()):
        assert (serial / p.name).read_bytes() == p.read_bytes(), p.name


def test_summary_md_one_row_per_design(fleet) -> None:
    lines = (fleet["out"] / "summary.md").read_text(encoding="utf-8").splitlines()
    assert lines[0] == "# loopwarden batch summary"
    assert lines[2].startswith("**8 designs: 8 pass, 0 fail, 0 could not be reviewed**")
    rows = [line for line in lines if line.startswith("| ") and "`" in line]
    assert len(rows) == 8
    soft = next(r for r in rows if r.startswith("| axis_soft |"))
    assert "`axis_soft.json`" in soft
    assert any(line.startswith("> **Caution.**") for line in lines)


# --------------------------------------------------------------------------- progress
class _Tty(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_bar_lines_and_quiet(tmp_path: Path, capsys) -> None:
    src = tmp_path / "in"
    for i in range(3):
        put(src, f"d{i}.toml", design_text(0.5 + 0.2 * i, f"d{i}"))
    inputs = collect_inputs([src])
    lines = io.StringIO()
    run_batch(inputs, tmp_path / "o1", jobs=1, date=DATE, progress=lines)
    text = lines.getvalue().splitlines()
    assert len(text) == 3 and text[0].startswith("[1/3] ") and text[-1].endswith(": pass")
    tty = _Tty()
    run_batch(inputs, tmp_path / "o2", jobs=1, date=DATE, progress=tty)
    drawn = tty.getvalue()
    assert drawn.startswith("\r[") and drawn.endswith("3/3 designs, 0 fail, 0 not reviewed\n")
    assert "#" * batch.Progress.WIDTH in drawn
    capsys.readouterr()
    assert main(["batch", str(src), "--out", str(tmp_path / "o3"), "--date", DATE,
                 "--quiet", "--jobs", "1"]) == 0
    assert capsys.readouterr() == ("", "")
    assert main(["batch", str(src), "--out", str(tmp_path / "o4"), "--date", DATE,
                 "--jobs", "1"]) == 0
    captured = capsys.readouterr()
    assert "3 designs" in captured.out and "3 pass" in captured.out
    assert captured.err.count("\n") == 3                  # not a terminal: one line each


def test_help(capsys) -> None:
    assert main(["batch", "--help"]) == 0
    out = capsys.readouterr().out
    assert "--jobs" in out and "summary.csv" in out and "exit status" in out


# --------------------------------------------------------------------------- workers
def test_worker_does_not_import_plotting_or_pdf(tmp_path: Path) -> None:
    path = put(tmp_path, "a.toml", design_text(1.0, "a"))
    code = textwrap.dedent(f"""
        import sys
        from loopwarden.batch import review_chunk
        from loopwarden.ruleset.loader import load_ruleset
        (o,) = review_chunk([(0, {str(path)!r}, {str(tmp_path / 'a.json')!r})],
                            load_ruleset(None).path, {DATE!r}, None)
        assert o.verdict == "pass", o
        heavy = sorted(m for m in sys.modules
                       if m.split(".")[0] in ("matplotlib", "reportlab", "pyhanko", "pandas"))
        print(heavy)
        """)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    assert done.stdout.strip() == "[]"
    assert (tmp_path / "a.json").exists()
