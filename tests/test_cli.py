"""The coldmargin command: assess, exit codes and messages."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
DEMOS = sorted(str(p) for p in (ROOT / "protocols").glob("*.yaml"))


def run(*args):
    return subprocess.run([sys.executable, "-m", "planner.cli", *args], capture_output=True, text=True,
                          cwd=ROOT, timeout=300)


@pytest.fixture(scope="module")
def all_demos():
    return run("assess", *DEMOS, "--json")


def test_assess_all_demos_json(all_demos):
    assert all_demos.returncode == 0, all_demos.stderr
    out = json.loads(all_demos.stdout)
    assert isinstance(out, list) and len(out) == len(DEMOS)
    for d in out:
        assert d["schema"] == "coldmargin/assessment-1"
        sol = d["solution"]
        assert set(sol) >= {"freezing_point_c", "osmolality_osmol_per_kg", "water_activity", "glass_transition_c",
                            "flags"}
        assert sol["freezing_point_c"] < 0 and 0 < sol["water_activity"] < 1
        assert isinstance(d["margins"]["supercooling_k"], float)
        assert d["cautions"][0]["id"] == "planning-support"
        assert d["verdict"]["state"] in ("fine", "watch", "do-not-proceed")


def test_rigid_demo_freezing_point_against_handbook(all_demos):
    # 10 % (w/w) glycerol in isotonic saline: glycerol alone depresses 2.32 K at 10 % [ref:crc-handbook]
    # (from memory) and 0.9 % NaCl about 0.54 K (common practice, no source); together in the same water
    # about 2.8-3.0 K. Checked to within the max(0.3 K, 6 %) tolerance the solution tests use.
    d = next(x for x in json.loads(all_demos.stdout) if "rigid chamber" in x["title"])
    assert d["solution"]["freezing_point_c"] == pytest.approx(-2.9, abs=0.3)


def test_one_file_prints_one_object_and_text_summary():
    r = run("assess", DEMOS[0], "--json")
    assert r.returncode == 0 and isinstance(json.loads(r.stdout), dict)
    r = run("assess", DEMOS[0])
    assert r.returncode == 0 and "Verdict:" in r.stdout and "Planning support only" in r.stdout


def test_invalid_input_exits_2_naming_the_key(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text(Path(DEMOS[0]).read_text().replace("volume_ml:", "volume_mL:", 1))
    r = run("assess", str(bad))
    assert r.returncode == 2
    assert "sample.volume_mL" in r.stderr and "did you mean 'volume_ml'" in r.stderr
    assert r.stdout == ""


def test_usage_error_exits_2():
    assert run("assess").returncode == 2
    assert run("frobnicate").returncode == 2


def test_calibrate_writes_a_file_and_never_overwrites(tmp_path):
    out = tmp_path / "cal.yaml"
    assay = ROOT / "protocols" / "assays" / "demo-saline-holds.csv"
    r = run("calibrate", str(assay), "--out", str(out))
    assert r.returncode == 0, r.stderr
    assert out.exists() and "observed vs predicted" in r.stdout
    again = run("calibrate", str(assay), "--out", str(out))
    assert again.returncode == 2 and "never overwritten" in again.stderr


def test_calibrate_names_row_and_column_of_a_bad_row(tmp_path):
    assay = (ROOT / "protocols" / "assays" / "demo-saline-holds.csv").read_text().splitlines()
    header = next(i for i, line in enumerate(assay) if line.startswith("sample_id"))
    cells = assay[header + 1].split(",")
    cells[2] = "one"
    assay[header + 1] = ",".join(cells)
    bad = tmp_path / "bad.csv"
    bad.write_text("\n".join(assay) + "\n")
    r = run("calibrate", str(bad), "--out", str(tmp_path / "x.yaml"))
    assert r.returncode == 2 and f"row {header + 2}" in r.stderr and "volume_ml" in r.stderr
