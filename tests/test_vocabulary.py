"""One name per concept across options, files, JSON and the API (rule: simwave/vocabulary.py).

This test collects every command-line option, every system-file and batch-file key
and the keys of the JSON the commands write, and fails on a second spelling of one
concept: the same option spelled alike on two commands but taking different values,
two live spellings of one concept, or a key for a quantity without its unit.
"""

import json
import warnings

import click
import pytest
from click.testing import CliRunner

import simwave
from simwave.batch import plan
from simwave.cli import main
from simwave.cli import system_input
from simwave.vocabulary import (QUANTITY_UNITS, RENAMED, SYNONYMS, SimwaveDeprecationWarning,
                                stem)

_UNIT_OF_METAVAR = {"HZ": "hz", "PCT": "pct", "DB": "db", "S": "s", "SECONDS": "s",
                    "VOLTS": "v", "DEG": "deg"}


def _options():
    """(command, long spelling, option) for every option of every command."""
    out = []
    ctx = click.Context(main)
    for name in sorted(main.list_commands(ctx)):
        cmd = main.get_command(ctx, name)
        for p in cmd.params:
            if isinstance(p, click.Option):
                spelling = max(p.opts, key=len)
                out.append((name, spelling, p))
    return out


def _value_kind(opt):
    if opt.is_flag:
        return "flag"
    if isinstance(opt.type, click.Choice):
        return "choice:" + ",".join(opt.type.choices)
    # batch's -s also takes a name first ([NAME=]TEXT): the same kind of value
    return (opt.metavar or opt.type.name).upper().replace("[NAME=]", "")


def _unit(name, opt=None):
    if opt is not None:
        word = (opt.metavar or "").split("|")[0].split(",")[0].upper()
        return _UNIT_OF_METAVAR.get(word, "")
    for suffix in ("hz", "pct", "db", "s", "deg"):
        if name.endswith("_" + suffix):
            return suffix
    return ""


def _file_keys():
    keys = set(system_input.FORMS) | set(system_input.EXTRA_KEYS) | set(system_input.DESIGN_KEYS)
    for ks in system_input.FORM_KEYS.values():
        keys |= set(ks)
    for ks in (plan.BATCH_KEYS, plan.OUTPUT_KEYS, plan.WRITE_KEYS, plan.RUN_KEYS, plan.READ_KEYS,
               plan.INPUT_KEYS, plan.MEASURE_KEYS):
        keys |= set(ks)
    return keys


def _json_keys(obj, out):
    if isinstance(obj, dict):
        for k, v in obj.items():
            out.add(k)
            _json_keys(v, out)
    elif isinstance(obj, list):
        for v in obj:
            _json_keys(v, out)
    return out


def _written_json_keys(tmp_path):
    keys = set()
    r = CliRunner().invoke(main, ["info", "sine:rate=1k,duration=0.1,frequency=50", "--json"])
    assert r.exit_code == 0, r.output
    keys |= _json_keys(json.loads(r.output), set())
    sys_ = simwave.System.parse("1/(1m*s+1)")
    report = simwave.simulate(sys_, "step:rate=20k,duration=0.02,time=2m",
                              output=tmp_path / "o.csv")
    keys |= _json_keys(report.to_dict(), set())
    keys |= _json_keys(sys_.to_dict(), set())
    return keys


#: Old spellings still written for one release (see simwave.vocabulary.RENAMED).
_OLD_KEYS = {"rate", "duration", "t0", "output_ics"}


def test_one_spelling_means_one_kind_of_value():
    seen = {}
    clashes = []
    for cmd, spelling, opt in _options():
        if opt.hidden:  # old spellings, going in the next release
            continue
        kind = _value_kind(opt)
        if spelling in seen and seen[spelling][1] != kind:
            clashes.append(f"{spelling}: {seen[spelling][0]} takes {seen[spelling][1]}, "
                           f"{cmd} takes {kind}")
        seen.setdefault(spelling, (cmd, kind))
    assert clashes == []


def test_no_second_live_spelling_of_a_concept(tmp_path):
    live = {}
    for cmd, spelling, opt in _options():
        if not opt.hidden:
            live.setdefault((stem(spelling), _unit(spelling, opt)), []).append(f"{cmd} {spelling}")
    old = _OLD_KEYS
    for key in _file_keys() | _written_json_keys(tmp_path):
        if key not in old:
            live.setdefault((stem(key), _unit(key)), []).append(key)
    problems = []
    for group in SYNONYMS:
        for unit in {u for (_, u) in live}:
            present = sorted(s for s in group if (s, unit) in live)
            if len(present) > 1:
                problems.append(f"{present} ({unit or 'no unit'}): "
                                f"{[live[(s, unit)] for s in present]}")
    assert problems == []


def test_keys_of_quantities_carry_their_unit(tmp_path):
    missing = []
    for key in sorted(_file_keys() | _written_json_keys(tmp_path)):
        unit = QUANTITY_UNITS.get(key)
        if unit and key not in _OLD_KEYS:
            missing.append(f"{key} (write {key}_{unit})")
    assert missing == []


def test_options_and_keys_of_one_stem_agree_on_the_unit(tmp_path):
    units = {}
    for key in _file_keys() | _written_json_keys(tmp_path):
        if _unit(key) and key not in _OLD_KEYS:
            units.setdefault(stem(key), set()).add(_unit(key))
    problems = []
    for cmd, spelling, opt in _options():
        if opt.hidden:
            continue
        u = _unit(spelling, opt) or _unit(spelling.lstrip("-").replace("-", "_"))
        if u and stem(spelling) in units and u not in units[stem(spelling)]:
            problems.append(f"{cmd} {spelling} ({u}) vs keys in {units[stem(spelling)]}")
        if u in ("hz", "pct", "db", "s") and len({x for x in units.get(stem(spelling), ())}) > 1:
            problems.append(f"{stem(spelling)}: keys in several units {units[stem(spelling)]}")
    assert problems == []


def test_every_hidden_option_is_a_registered_old_spelling():
    for cmd, spelling, opt in _options():
        if opt.hidden:
            assert any(spelling in old for old in RENAMED), (cmd, spelling)


def test_old_spellings_still_work_and_say_so(tmp_path):
    run = CliRunner().invoke
    step = "step:rate=10k,duration=0.1,time=10m"
    out = tmp_path / "o.csv"
    assert run(main, ["run", step, "-s", "1/(1m*s+1)", "-o", str(out)]).exit_code == 0
    new = run(main, ["measure", str(out), "--settling-band", "5", "--json"])
    with warnings.catch_warnings():
        warnings.simplefilter("always")
        old = run(main, ["measure", str(out), "--band", "5", "--json"])
    assert old.exit_code == 0 and "old spelling of --settling-band" in old.output
    assert json.loads(new.output) == json.loads(old.output[old.output.index("{"):])
    both = run(main, ["measure", str(out), "--band", "5", "--settling-band", "5"])
    assert both.exit_code == 2 and "same option" in both.output
    r = run(main, ["inspect", "-s", "1/(1m*s+1)", "--rate", "10k", "--band", "100"])
    assert r.exit_code == 0 and "old spelling of --band-hz" in r.output
    with pytest.warns(SimwaveDeprecationWarning, match="old spelling of cutoff_hz="):
        a = system_input.parse_design_text("butterworth lowpass order=2 cutoff=1k")
    b = system_input.parse_design_text("butterworth lowpass order=2 cutoff_hz=1k")
    assert list(a.poles) == list(b.poles)
    with pytest.warns(SimwaveDeprecationWarning, match="old spelling of initial_output="):
        y_old = simwave.simulate("y'' + 3y' + 2y = 2x", "step:rate=1k,duration=0.01",
                                 output_ics=[1.0, 0.0])
    y_new = simwave.simulate("y'' + 3y' + 2y = 2x", "step:rate=1k,duration=0.01",
                             initial_output=[1.0, 0.0])
    assert (y_old.data == y_new.data).all()


def test_errors_name_the_command_line_spelling(tmp_path):
    r = CliRunner().invoke(main, ["inspect", "-s", "1/(s+1)", "--band-hz", "10"])
    assert r.exit_code == 2 and "--band-hz" in r.output and "band_hz" not in r.output
