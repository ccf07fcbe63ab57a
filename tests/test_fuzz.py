"""Fuzzing every command: odd files and generated system texts never end in a traceback.

Each case is classified by ``fuzzkit.run_case`` (clean / traceback / wrong / hang /
lost); every case must be clean. The odd-file corpus is made by
``make_odd_files.py`` (no binary blobs stored). Hypothesis draws system texts from a
small grammar of H(s) pieces with extreme numbers, plus raw character soup; the
default run draws a sample, ``SIMWAVE_SLOW=1`` ten times as many.
"""

from __future__ import annotations

import os
import time

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fuzzkit import Outcome, clear_outputs, run_case
from make_odd_files import make_corpus

SLOW = os.environ.get("SIMWAVE_SLOW") == "1"
STEP = "step:rate=1k,duration=50m,time=5m"
OUTS = ("out.csv", "m.json", "plot.png")


@pytest.fixture(scope="module")
def corpus(tmp_path_factory):
    folder = str(tmp_path_factory.mktemp("odd-files"))
    return folder, make_corpus(folder)


def _report(bad: list[Outcome]) -> str:
    return "\n".join(f"{o.kind}: simwave {' '.join(o.args)} -> {o.detail}" for o in bad)


def waveform_cases(name: str) -> list[tuple[list[str], tuple[str, ...], bool]]:
    """(args, outputs, prints JSON) for each command that reads a waveform file."""
    return [
        (["info", name, "--json"], (), True),
        (["info", name, "--no-stats"], (), False),
        (["run", name, "-s", "1/(s/100+1)", "-o", "out.csv", "--metrics", "m.json", "--json"],
         ("out.csv", "m.json"), True),
        (["measure", name, "--json"], (), True),
    ]


def system_cases(name: str) -> list[tuple[list[str], tuple[str, ...], bool]]:
    """(args, outputs, prints JSON) for each command that reads a system."""
    return [
        (["inspect", "-s", name, "--json"], (), True),
        (["inspect", "-s", name, "--rate", "1k", "--json"], (), True),
        (["run", STEP, "-s", name, "-o", "out.csv", "--metrics", "m.json", "--json"],
         ("out.csv", "m.json"), True),
    ]


def corpus_outcomes(folder: str, names: list[str]) -> list[Outcome]:
    """Every odd file through every command that takes it."""
    outcomes = []
    for name in names:
        cases = system_cases(name) if name.endswith(".toml") else waveform_cases(name)
        for args, outputs, as_json in cases:
            outcomes.append(run_case(args, folder, outputs=outputs, expect_json=as_json))
            clear_outputs(folder, OUTS)
    return outcomes


def test_odd_files_through_every_command(corpus):
    # every file with SIMWAVE_SLOW=1; by default a fixed third of them, a different third
    # each day (the whole corpus runs in tests/fuzz_counts.py and the slow run)
    folder, names = corpus
    chosen = sorted(names)
    if not SLOW:
        day = int(time.time() // 86400) % 3
        chosen = chosen[day::3]
    outcomes = corpus_outcomes(folder, chosen)
    bad = [o for o in outcomes if o.kind != "clean"]
    assert not bad, _report(bad)
    # the corpus is meant to be odd: most cases are refused with one line, not accepted
    assert sum(o.exit_code == 2 for o in outcomes) > len(outcomes) // 3


def test_odd_files_give_the_expected_messages(corpus):
    # messages the fault campaign found misleading, now named for what they are
    folder, _ = corpus
    expect = {
        "time-backwards.csv": "backwards",
        "time-constant.csv": "never advances",
        "dt-zero.h5": "sample interval",
        "rate-bool.h5": "true/false",
        "nested.toml": "nested too deeply",
        "external-missing.h5": "external file",
    }
    for name, words in expect.items():
        args = (["inspect", "-s", name] if name.endswith(".toml") else ["info", name])
        o = run_case(args, folder)
        assert o.kind == "clean" and o.exit_code == 2, (name, o)
        assert words in o.stderr, (name, o.stderr)


# ----------------------------------------------------------------------- system texts
NUMBERS = st.sampled_from(["0", "1", "2", "0.5", "1e4", "1e-300", "1e300", "5e-324", "1e39",
                           "128710", "1e9", "1e160", "-1", "3.7e-12"]) | st.floats(
    allow_nan=False, allow_infinity=False, width=64).map(repr)
ATOMS = st.one_of(
    NUMBERS, st.just("s"),
    NUMBERS.map(lambda a: f"(s+{a})"), NUMBERS.map(lambda a: f"(s-{a})"),
    st.tuples(NUMBERS, NUMBERS).map(lambda t: f"(s^2+{t[0]}*s+{t[1]})"),
    NUMBERS.map(lambda a: f"exp(-s*{a})"),
)
EXPRESSIONS = st.recursive(
    ATOMS,
    lambda inner: st.one_of(
        st.tuples(inner, inner).map(lambda t: f"{t[0]}*{t[1]}"),
        st.tuples(inner, inner).map(lambda t: f"{t[0]}/{t[1]}"),
        st.tuples(inner, inner).map(lambda t: f"({t[0]}+{t[1]})"),
        st.tuples(inner, st.integers(0, 25)).map(lambda t: f"({t[0]})^{t[1]}"),
    ),
    max_leaves=6,
)
SYSTEM_TEXTS = EXPRESSIONS | st.text(alphabet="s0123456789.+-*/^()e xp", max_size=24)


@settings(max_examples=300 if SLOW else 12, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(text=SYSTEM_TEXTS)
def test_generated_system_texts(tmp_path, text):
    folder = str(tmp_path)
    for args, outputs, as_json in system_cases(text):
        o = run_case(args, folder, outputs=outputs, expect_json=as_json, timeout_s=120)
        clear_outputs(folder, OUTS)
        assert o.kind == "clean", _report([o])


# ----------------------------------------------------------------------- generated CSV files
CELLS = st.sampled_from(["0", "1", "-1", "1e308", "-1e308", "5e-324", "nan", "inf", "", "x",
                         "0.001", "1e-3", "2.5"])


@settings(max_examples=200 if SLOW else 10, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(times=st.lists(st.sampled_from(["0", "0.001", "0.002", "0.001", "1e300", "-1", "nan",
                                       "0.003", "0.004", ""]), min_size=0, max_size=12),
       values=st.lists(CELLS, min_size=0, max_size=12),
       newline=st.sampled_from(["\n", "\r\n", "\r"]))
def test_generated_csv_files(tmp_path, times, values, newline):
    rows = [f"{t},{v}" for t, v in zip(times, values, strict=False)]
    (tmp_path / "in.csv").write_text(newline.join(["time,x", *rows]) + newline)
    folder = str(tmp_path)
    for args, outputs, as_json in waveform_cases("in.csv"):
        o = run_case(args, folder, outputs=outputs, expect_json=as_json, timeout_s=120)
        clear_outputs(folder, OUTS)
        assert o.kind == "clean", _report([o])
