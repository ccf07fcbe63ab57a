"""Batch descriptions: schema checks with line numbers, globs, output names, bad input.

These tests plan batches (and run the CLI on bad input) without running any
pair, so they take well under a second each.
"""

from __future__ import annotations

import glob
import os
import socket
import sys
import textwrap
import time

import pytest
from click.testing import CliRunner

from simwave.batch import load_description, quick_plan
from simwave.batch.lines import KeyLines
from simwave.batch.plan import glob_regex
from simwave.batch.summary import check_limits
from simwave.cli import main
from simwave.cli import cmd_batch  # noqa: F401 - registers the command
from simwave.errors import BatchError, SimwaveError

GOOD_SYSTEMS = """
[systems.lp2]
design = { family = "butterworth", kind = "lowpass", order = 2, cutoff_hz = "200" }
method = "bilinear"

[systems.rc]
file = "systems/rc.toml"
"""


@pytest.fixture()
def campaign(tmp_path):
    """A directory with three CSV inputs, a system file, and a writer for descriptions."""
    data = tmp_path / "data"
    data.mkdir()
    for i in range(3):
        (data / f"r{i}.csv").write_text("time,v\n0,0\n0.001,1\n0.002,1\n0.003,1\n")
    (tmp_path / "systems").mkdir()
    (tmp_path / "systems" / "rc.toml").write_text('expression = "2*pi*100/(s + 2*pi*100)"\n')

    def write(text: str) -> str:
        path = tmp_path / "batch.toml"
        path.write_text(textwrap.dedent(text).lstrip("\n"))
        return str(path)

    return tmp_path, write


def _error(path: str) -> str:
    with pytest.raises(BatchError) as info:
        load_description(path)
    return str(info.value)


# ----------------------------------------------------------------------------- a good plan
def test_plan_pairs_every_input_with_every_system(campaign):
    root, write = campaign
    path = write(GOOD_SYSTEMS + """
        [output]
        dir = "out"
        format = "csv"

        [[inputs]]
        files = ["data/*.csv"]

        [[inputs]]
        signal = "step:rate=2k,duration=50m,time=5m"
        name = "step"
    """)
    plan = load_description(path)
    assert [s.name for s in plan.systems] == ["lp2", "rc"]
    assert [i.label for i in plan.inputs] == [
        os.path.join("data", "r0.csv"), os.path.join("data", "r1.csv"),
        os.path.join("data", "r2.csv"), "step:rate=2k,duration=50m,time=5m"]
    assert len(plan.pairs) == 8
    names = sorted(os.path.basename(p.output) for p in plan.pairs)
    assert names[:2] == ["r0__lp2.csv", "r0__rc.csv"] and "step__rc.csv" in names
    assert all(p.metrics.endswith(".metrics.json") for p in plan.pairs)
    # Paths are relative to the description file, whatever the current directory.
    assert plan.output_dir == str(root / "out")
    assert all(os.path.isabs(i.source) for i in plan.inputs if i.is_file)
    # A system file's table is named after the file, as `simwave run -s rc.toml` names it.
    assert plan.systems[1].definition[1]["name"] == "rc"
    assert plan.systems[1].definition_file == str(root / "systems" / "rc.toml")
    job = plan.job_fields(plan.pairs[0])
    assert job["method"] == "bilinear" and job["metrics"] == plan.pairs[0].metrics


def test_fingerprint_follows_the_definition_not_the_file_time(campaign):
    _, write = campaign
    base = GOOD_SYSTEMS + '\n[[inputs]]\nfiles = "data/r0.csv"\n'
    a = load_description(write(base))
    b = load_description(write(base.replace('method = "bilinear"', 'method = "matched-z"')))
    c = load_description(write(base))
    assert a.fingerprint(a.pairs[0]) == c.fingerprint(c.pairs[0])
    assert a.fingerprint(a.pairs[0]) != b.fingerprint(b.pairs[0])
    assert a.fingerprint(a.pairs[1]) == b.fingerprint(b.pairs[1])  # rc unchanged


# ----------------------------------------------------------------------------- unknown keys
@pytest.mark.parametrize("text, key, line", [
    ('bogus = 1\n' + GOOD_SYSTEMS + '[[inputs]]\nfiles = "data/*.csv"\n', "bogus", 1),
    ('[systems.a]\nexpression = "1/(s+1)"\nmethd = "bilinear"\n[[inputs]]\nfiles = "data/*.csv"\n',
     "methd", 3),
    ('[systems]\na = { expression = "1/(s+1)", methd = "x" }\n[[inputs]]\nfiles = "data/*.csv"\n',
     "methd", 2),
    ('[systems.a]\nexpression = "1/(s+1)"\n[[inputs]]\nfiles = "data/r0.csv"\n\n[[inputs]]\n'
     'files = "data/r1.csv"\nrte = 5\n', "rte", 8),
    ('[systems.a]\n[systems.a.zpk]\npoles = [-1]\ngian = 2\n[[inputs]]\nfiles = "data/*.csv"\n',
     "gian", 4),
    ('[output]\ndir = "out"\nfromat = "csv"\n[systems.a]\nexpression = "1/(s+1)"\n'
     '[[inputs]]\nfiles = "data/*.csv"\n', "fromat", 3),
    ('[batch]\njob = 2\n[systems.a]\nexpression = "1/(s+1)"\n[[inputs]]\nfiles = "data/*.csv"\n',
     "job", 2),
    ('[systems.a]\nexpression = "1/(s+1)"\n[measure]\nsettling_band = 5\n'
     '[[inputs]]\nfiles = "data/*.csv"\n', "settling_band", 4),
])
def test_unknown_key_is_named_with_its_line(campaign, text, key, line):
    _, write = campaign
    message = _error(write(text))
    assert f"'{key}'" in message
    assert f"batch.toml, line {line}" in message
    assert "\n" not in message


def test_key_lines_skip_comments_and_other_tables():
    text = 'a = 1\n# method = 2\n[x]\nmethod = 3\n[y]\nmethod = 4\n[[z]]\nk = 1\n[[z]]\nk = 2\n'
    lines = KeyLines(text)
    assert lines.line_of("method", ["x"]) == 4
    assert lines.line_of("method", ["y"]) == 6
    assert lines.line_of("k", ["z", 1]) == 10
    assert lines.line_of("a") == 1
    assert lines.line_of("absent", ["x"]) is None


@pytest.mark.parametrize("text, words", [
    ('[systems.a]\nexpression = "1/(s+1"\n[[inputs]]\nfiles = "data/*.csv"\n',
     ["line 2", "expression", "expected ')'"]),
    ('[systems.a]\nexpression = "1/(s+1)"\nmethod = "eulr"\n[[inputs]]\nfiles = "data/*.csv"\n',
     ["line 3", "unknown method 'eulr'"]),
    ('[systems.a]\nexpression = "1/(s+1)"\n[[inputs]]\n'
     'signal = "step:rate=1k,duration=1,widht=3"\n', ["line 4", "widht"]),
    ('[systems.a]\nexpression = "1/(s+1)"\n[[inputs]]\nfiles = "data/nope.csv"\n',
     ["line 4", "nope.csv not found"]),
    ('[systems.a]\nexpression = "1/(s+1)"\n[output]\nformat = "mp9"\n'
     '[[inputs]]\nfiles = "data/*.csv"\n', ["line 4", "mp9"]),
    ('[systems.a]\nexpression = "1/(s+1)"\nlimits = { overshot = { max = 1 } }\n'
     '[[inputs]]\nfiles = "data/*.csv"\n', ["line 3", "unknown metric 'overshot'"]),
    ('[systems.a]\nexpression = "1/(s+1)"\n[measure]\nsettling_band_pct = -3\n'
     '[[inputs]]\nfiles = "data/*.csv"\n', ["line 3", "settling band"]),
    ('[systems.a]\nexpression = "1/(s+1)"\n[output]\nname = "{input}"\n'
     '[[inputs]]\nfiles = "data/*.csv"\n', ["{system}"]),
    ('[systems."a b"]\nexpression = "1/(s+1)"\n[[inputs]]\nfiles = "data/*.csv"\n',
     ["system name 'a b'"]),
    ('[systems.a]\nexpression = "1/(s+1)"\n[[inputs]]\nfiles = "data/*.csv"\nname = "x"\n',
     ["line 5", "generated signal"]),
    ('[systems.a]\nexpression = "1/(s+1)"\n', ["[[inputs]]"]),
    ('[[inputs]]\nfiles = "data/*.csv"\n', ["[systems]"]),
    ('[systems.a]\nexpression = "1/(s+1)"\n[[inputs]\n', ["not valid TOML", "line 3"]),
])
def test_bad_values_give_one_line_naming_the_place(campaign, text, words):
    _, write = campaign
    message = _error(write(text))
    for w in words:
        assert w in message, message
    assert "\n" not in message


# ----------------------------------------------------------------------------- globs and names
def test_glob_matching_nothing_warns_and_nothing_at_all_is_an_error(campaign):
    _, write = campaign
    plan = load_description(write(
        '[systems.a]\nexpression = "1/(s+1)"\n[[inputs]]\nfiles = ["data/*.csv", "rec/*.wav"]\n'))
    assert len(plan.pairs) == 3
    assert len(plan.warnings) == 1 and "'rec/*.wav' matches no file" in plan.warnings[0]
    assert "line 4" in plan.warnings[0]
    message = _error(write('[systems.a]\nexpression = "1/(s+1)"\n[[inputs]]\n'
                           'files = ["rec/*.wav", "more/*.flac"]\n'))
    assert "no input at all" in message and "rec/*.wav" in message and "more/*.flac" in message


def test_duplicate_output_names_are_refused(campaign):
    root, write = campaign
    (root / "data" / "sub").mkdir()
    (root / "data" / "sub" / "r0.csv").write_text("time,v\n0,0\n0.001,1\n")
    text = '[systems.a]\nexpression = "1/(s+1)"\n[[inputs]]\nfiles = ["data/**/*.csv"]\n'
    message = _error(write(text))
    assert "duplicate output name r0__a" in message and "{parent}" in message
    # With the folder in the name template they are told apart.
    plan = load_description(write(text + '[output]\nname = "{parent}-{input}__{system}"\n'))
    assert sorted(os.path.basename(p.output) for p in plan.pairs)[0] == "data-r0__a.csv"


def test_a_file_matched_twice_is_one_input(campaign):
    _, write = campaign
    plan = load_description(write('[systems.a]\nexpression = "1/(s+1)"\n[[inputs]]\n'
                                  'files = ["data/*.csv", "data/r1.csv"]\n'))
    assert len(plan.inputs) == 3 and len(plan.pairs) == 3
    # With different reader options it is two inputs, and their outputs would collide.
    message = _error(write('[systems.a]\nexpression = "1/(s+1)"\n[[inputs]]\n'
                           'files = ["data/*.csv"]\n[[inputs]]\nfiles = "data/r1.csv"\n'
                           'rate_hz = "1k"\n'))
    assert "duplicate output name r1__a" in message


def test_output_directory_inside_the_inputs_glob_is_refused(campaign):
    _, write = campaign
    message = _error(write('[systems.a]\nexpression = "1/(s+1)"\n[output]\ndir = "data/out"\n'
                           '[[inputs]]\nfiles = "data/**/*.csv"\n'))
    assert "line 6" in message and "inside this input pattern" in message
    message = _error(write('[systems.a]\nexpression = "1/(s+1)"\n[output]\ndir = "data"\n'
                           '[[inputs]]\nfiles = "data/*.csv"\n'))
    assert "inside this input pattern" in message


@pytest.mark.parametrize("pattern", [
    "*.csv", "data/*.csv", "**/*.csv", "data/**", "data/**/r?.csv", "data/[ab]*/*.csv",
    "data/[!a]*/x*.csv", "**/b/*",
])
def test_glob_regex_matches_what_glob_finds(tmp_path, pattern):
    # Reference: the standard library's glob.glob(recursive=True) on a real tree.
    for rel in ["x.csv", "data/r1.csv", "data/a1/x1.csv", "data/b/x2.csv", "data/b/deep/r3.csv",
                "data/b/y.txt", "other/b/z.csv"]:
        p = tmp_path / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text("")
    root = str(tmp_path).replace(os.sep, "/")
    found = {p.replace(os.sep, "/") for p in glob.glob(os.path.join(str(tmp_path), pattern),
                                                      recursive=True) if os.path.isfile(p)}
    everything = {p.replace(os.sep, "/") for p in glob.glob(os.path.join(str(tmp_path), "**"),
                                                           recursive=True) if os.path.isfile(p)}
    rx = glob_regex(root + "/" + pattern)
    assert {p for p in everything if rx.match(p)} == found


# ----------------------------------------------------------------------------- quick form
def test_quick_form_names_systems_and_checks_them(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "notch.toml").write_text(
        'name = "notch50"\nexpression = "(s^2+98696)/(s^2+31.4*s+98696)"\n')
    (tmp_path / "plain.toml").write_text('expression = "1/(s+1)"\n')
    plan = quick_plan(["notch.toml", "plain.toml", "10/(s+10)"],
                      ["step:rate=1k,duration=0.1"], "out")
    # Batch names: the file stem (short, file-name safe); the file's own name stays the
    # System's name, as `simwave run -s notch.toml` sees it.
    assert [s.name for s in plan.systems] == ["notch", "plain", "system3"]
    assert plan.systems[0].definition[1]["name"] == "notch50"
    assert plan.systems[2].definition == ("text", "10/(s+10)")
    with pytest.raises(SimwaveError, match="two systems are named 'plain'"):
        quick_plan(["plain.toml", "plain.toml"], ["step:rate=1k,duration=0.1"], "out")
    with pytest.raises(SimwaveError, match="expected"):
        quick_plan(["1/(s+1"], ["step:rate=1k,duration=0.1"], "out")


def test_limits_bands():
    limits = {"overshoot_pct_worst": (None, 10.0), "settling_time_s_longest": (None, 0.02),
              "steady_state_gain": (0.99, 1.01)}
    assert check_limits({"overshoot_pct_worst": 4.3, "settling_time_s_longest": 0.01,
                         "steady_state_gain": 1.0}, limits) == "pass"
    verdict = check_limits({"overshoot_pct_worst": 12.5, "settling_time_s_longest": None,
                            "not_settled": 1, "steady_state_gain": 0.9}, limits)
    assert verdict.startswith("fail: ")
    assert "overshoot_pct_worst=12.5 > 10" in verdict
    assert "settling_time_s_longest: never settled" in verdict
    assert "steady_state_gain=0.9 < 0.99" in verdict
    # A sine record has no transitions: the transition bands are not judged, only listed.
    assert check_limits({"overshoot_pct_worst": None, "settling_time_s_longest": None,
                         "not_settled": 0, "steady_state_gain": 1.0}, limits) == \
        "pass; not measured: overshoot_pct_worst, settling_time_s_longest"
    assert check_limits({}, {"thd_pct": (None, 1.0)}) == "not measured: thd_pct"
    assert check_limits({"overshoot_pct_worst": 50.0}, {}) == ""


# ----------------------------------------------------------------------------- CLI: bad input
def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.parametrize("args_of", [
    lambda root: [str(root / "batch.toml")],                                   # unknown key
    lambda root: ["-s", "1/(s+1)", str(root / "data" / "*.wav"), "-o", str(root / "out")],
    lambda root: ["-s", "1/(s+1)", "-o", str(root / "out")],                   # no inputs
    lambda root: ["-s", "1/(s+1)", str(root / "data" / "r0.csv")],             # no -o
    lambda root: [str(root / "batch.toml"), "--method", "bilinear"],           # quick-only
    lambda root: ["-s", "1/(s+1)", str(root / "data" / "*.csv"), "-o", str(root / "out"),
                  "--scheduler", f"tcp://127.0.0.1:{_free_port()}", "--connect-timeout", "1"],
])
def test_cli_bad_input_exit_2_one_line_nothing_written(campaign, args_of):
    root, write = campaign
    write('[systems.a]\nexpression = "1/(s+1)"\nmethd = 1\n[output]\ndir = "out"\n'
          '[[inputs]]\nfiles = "data/*.csv"\n')
    before = sorted(os.listdir(root))
    started = time.monotonic()
    result = CliRunner().invoke(main, ["batch", *args_of(root)])
    assert result.exit_code == 2, result.output
    lines = [ln for ln in result.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("Error: "), result.output
    assert "Traceback" not in result.output
    assert sorted(os.listdir(root)) == before  # no output directory, no summary
    assert time.monotonic() - started < 15


def test_unreachable_scheduler_message(campaign):
    root, _ = campaign
    port = _free_port()
    result = CliRunner().invoke(main, ["batch", "-s", "1/(s+1)", str(root / "data" / "*.csv"),
                                       "-o", str(root / "out"), "--scheduler",
                                       f"tcp://127.0.0.1:{port}", "--connect-timeout", "1"])
    assert result.exit_code == 2
    assert f"cannot reach the Dask scheduler at tcp://127.0.0.1:{port} within 1 s" in result.output


def test_missing_dask_is_a_clear_error(campaign, monkeypatch):
    root, _ = campaign
    # A None entry in sys.modules makes the import fail, as when dask is not installed.
    monkeypatch.setitem(sys.modules, "dask.distributed", None)
    result = CliRunner().invoke(main, ["batch", "-s", "1/(s+1)", str(root / "data" / "*.csv"),
                                       "-o", str(root / "out"), "--scheduler", "tcp://x:1"])
    assert result.exit_code == 2
    assert "pip install 'simwave[distributed]'" in result.output
    assert not (root / "out").exists()


def test_the_documented_schema_example_loads(tmp_path):
    """The description in simwave.batch.plan's docstring is a valid, complete example."""
    import textwrap as tw

    import simwave.batch.plan as plan_module

    block = plan_module.__doc__.split("::", 1)[1].split("A system entry")[0]
    (tmp_path / "recordings").mkdir()
    (tmp_path / "extra").mkdir()
    (tmp_path / "systems").mkdir()
    for name in ("recordings/a.csv", "recordings/b.csv", "extra/run7.csv"):
        (tmp_path / name).write_text("v\n0\n1\n1\n")
    (tmp_path / "systems" / "sensor.toml").write_text('expression = "1/(1m*s + 1)"\n')
    path = tmp_path / "campaign.toml"
    path.write_text(tw.dedent(block))
    plan = load_description(str(path))
    assert plan.jobs == 4 and plan.scheduler == "tcp://10.1.2.3:8786"
    assert plan.connect_timeout_s == 10
    assert [s.name for s in plan.systems] == ["lp4", "sensor", "rc"]
    assert plan.systems[0].run_options == {"method": "bilinear", "prewarp_hz": 1000.0}
    assert plan.systems[0].limits == {"overshoot_pct_worst": (None, 12.0)}
    assert plan.limits == {"overshoot_pct_worst": (None, 10.0),
                           "settling_time_s_longest": (None, 0.02),
                           "steady_state_gain": (0.99, 1.01)}
    assert len(plan.inputs) == 4 and plan.inputs[0].rate == 10_000.0
    assert len(plan.pairs) == 12
    assert os.path.basename(plan.pairs[0].output) == "a__lp4.csv"
    assert plan.write_options == {"subtype": "FLOAT"}
