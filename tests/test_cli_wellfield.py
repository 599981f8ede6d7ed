"""``blendq wellfield`` end to end on the demo wellfield: the table, the output folder, the
cautions, and no worker process left after the command, also when it is stopped."""

from __future__ import annotations

import multiprocessing
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
from typer.testing import CliRunner

from blendq.cli import app
from blendq.report.outputs import MARKER_NAME

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "wellfield"
runner = CliRunner()


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_the_demo_wellfield_end_to_end(tmp_path):
    out = tmp_path / "out"
    r = run("wellfield", EXAMPLE / "wellfield.toml", "--draws", "30", "--workers", "2",
            "--out", out, "--plan-draws", "20")
    assert r.exit_code == 0, r.output
    text = r.stdout
    assert "20 of 30 draws in the program" in text
    assert "4 wells, 4 analysed, 0 failed" in text
    for well in ("TH-2", "TH-5", "TH-7", "TH-9"):
        assert f"{well} (entry point" in text
    assert "planning aid, not a compliance determination" in text.splitlines()[-1]
    assert sorted(p.name for p in out.iterdir()) == sorted(
        [MARKER_NAME, "n_minus_1.csv", "plan.csv", "wellfield.csv", "wellfield.png",
         "wellfield.svg", "wellfield.txt"])
    assert "Blending plan:" in text and "N-1 (each planned well out of service" in text
    plan = pd.read_csv(out / "plan.csv", comment="#")
    assert set(plan["source"]) >= {"TH-2", "TH-5", "TH-7", "TH-9", "Interconnection"}
    outages = pd.read_csv(out / "n_minus_1.csv", comment="#")
    assert list(dict.fromkeys(outages["well_out"])) == ["TH-2", "TH-5", "TH-7", "TH-9"]
    # the N-1 text and table agree on which entry point fails by itself and which only
    # through the link of the wells' drawdown (the demo's interference links the two plants)
    fails = outages.set_index(["well_out", "entry_point"])["fails"]
    assert fails["TH-2", "North plant"] == "itself"
    assert "    North plant fails on its own wells: short 650 gpm of its 650 gpm demand; nitrate " \
           "over margin x limit" in text
    assert fails["TH-2", "South plant"] == "through the link"
    assert ("    South plant: meets demand and limits on its own wells, but no joint plan exists "
            "because its wells' drawdown is linked to North plant's") in text
    assert fails["TH-5"].tolist() == ["no", "no"] and "TH-5 out: every entry point met" in text
    table = pd.read_csv(out / "wellfield.csv", comment="#")
    assert list(table["well"]) == ["TH-2", "TH-5", "TH-7", "TH-9"]
    assert "window low [gpm]" in table.columns
    assert "planning aid" in (out / "wellfield.txt").read_text(encoding="utf-8")
    assert (out / "wellfield.png").read_bytes().startswith(b"\x89PNG")
    assert multiprocessing.active_children() == []


def test_an_output_folder_holding_the_inputs_is_refused_before_the_run():
    r = run("wellfield", EXAMPLE, "--out", EXAMPLE, "--workers", "1")
    assert r.exit_code == 2
    assert "option --out:" in r.output and "would overwrite or delete" in r.output
    assert r.output.count("\n") == 1


def test_a_bad_wellfield_file_is_one_line(tmp_path):
    (tmp_path / "wellfield.toml").write_text('[wellfield]\nname = "x"\nspeed = 3\n',
                                             encoding="utf-8")
    r = run("wellfield", tmp_path)
    assert r.exit_code == 2
    assert r.output.strip() == ('blendq: error: wellfield.toml field wellfield.speed: "speed" '
                                "is not a key blendq knows here (known: display_units, margin, "
                                "name, probability, seed)")
    r = run("wellfield", EXAMPLE, "--workers", "0")
    assert r.exit_code == 2 and "--workers" in r.output


def test_a_bad_plan_draws_is_one_line_before_the_run():
    for args, words in [(("--plan-draws", "0"), "0 is not 1 or more"),
                        (("--plan-draws", "-3"), "-3 is not 1 or more"),
                        (("--draws", "30", "--plan-draws", "31"),
                         "31 is more than the wells' draws (30, --draws)")]:
        r = run("wellfield", EXAMPLE, "--workers", "1", *args)
        assert r.exit_code == 2, r.output
        assert r.output.strip() == f"blendq: error: Invalid value for --plan-draws: {words}"
    r = run("wellfield", EXAMPLE, "--workers", "1", "--plan-draws", "2.5")  # the parser's own
    assert r.exit_code == 2 and "--plan-draws" in r.output


def test_plan_draws_above_the_projects_draws_is_refused(tmp_path):
    # one well whose project asks for 12 draws; no --draws, so the project's setting counts
    import shutil

    shutil.copytree(EXAMPLE / "TH-2", tmp_path / "TH-2")
    project = tmp_path / "TH-2" / "project.toml"
    text = project.read_text(encoding="utf-8")
    assert "draws = 1000" in text
    project.write_text(text.replace("draws = 1000", "draws = 12"), encoding="utf-8")
    (tmp_path / "wellfield.toml").write_text(
        '[wellfield]\nname = "one well"\n\n[[entry_points]]\nname = "A"\n'
        'demand = "300 gpm"\n\n[[wells]]\nname = "TH-2"\nproject = "TH-2"\n'
        'entry_point = "A"\n', encoding="utf-8")
    r = run("wellfield", tmp_path, "--workers", "1", "--plan-draws", "13")
    assert r.exit_code == 2, r.output
    assert r.output.strip() == ("blendq: error: Invalid value for --plan-draws: 13 is more "
                                "than the wells' draws (12, their projects' setting)")


#: ``blendq wellfield`` that sends itself SIGTERM once the workers are running
DRIVER = """
import concurrent.futures, os, signal, sys

real = concurrent.futures.as_completed


def as_completed(futures, *args, **kwargs):
    os.kill(os.getpid(), signal.SIGTERM)
    yield from real(futures, *args, **kwargs)


concurrent.futures.as_completed = as_completed
from blendq.cli import main

sys.argv = ["blendq", "wellfield", sys.argv[1], "--draws", "30", "--workers", "2",
            "--out", sys.argv[2]]
main()
"""


def _in_session(sid: int) -> list[str]:
    """Command lines of the live processes of the session ``sid`` (field 6 of
    /proc/PID/stat; a zombie, state Z, has ended)."""
    left = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
            if int(fields[3]) == sid and fields[0] != "Z":
                left.append((stat.parent / "cmdline").read_bytes().replace(b"\0", b" ")
                            .decode(errors="replace"))
        except OSError:  # a process that ended meanwhile
            continue
    return left


def _session_ends(sid: int, seconds: float = 10.0) -> list[str]:
    """The session's processes still alive after ``seconds`` (multiprocessing's resource
    tracker ends by itself when the command has closed its end of the pipe)."""
    end = time.monotonic() + seconds
    while _in_session(sid) and time.monotonic() < end:
        time.sleep(0.1)
    return _in_session(sid)


def test_sigterm_leaves_no_worker_and_no_output(tmp_path):
    out = tmp_path / "out"
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen([sys.executable, "-c", DRIVER, str(EXAMPLE), str(out)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env=env, start_new_session=True)
    stdout, stderr = proc.communicate(timeout=300)
    assert proc.returncode == 128 + signal.SIGTERM, stderr
    assert stderr.strip() == "blendq: stopped by SIGTERM; no partial output was left"
    assert not out.exists() and list(tmp_path.iterdir()) == []
    assert _session_ends(proc.pid) == []
