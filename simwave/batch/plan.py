"""The batch description: schema, validation, and the list of (input, system) pairs.

A batch is planned completely before anything is written: every system is
built once, every glob expanded, every output name checked, so that bad input
stops the batch with one line (exit code 2) and leaves the disk untouched.

Description file (TOML; paths are relative to the file)::

    [batch]                      # optional: how to run
    jobs = 4                     # local worker processes (default: all cores)
    scheduler = "tcp://10.1.2.3:8786"   # a Dask scheduler instead of the local pool
    connect_timeout_s = 10

    [output]
    dir = "results"              # default "batch-output"
    format = "csv"               # same (default), csv, h5, wav, flac, ...
    name = "{input}__{system}"   # file stem; {input} {system} {parent} {path} {index}
    summary = "summary"          # summary.csv and summary.json in dir
    include_input = false        # write the input beside the output
    write = { subtype = "FLOAT" }   # writer options: subtype on_clip full_scale offset dtype
                                    # compression delimiter time_column dataset

    [measure]                    # measurement options (see simwave.measure)
    settling_band_pct = 2
    reference_levels_pct = [10, 50, 90]

    [limits]                     # tolerance bands on summary columns: min and/or max
    overshoot_pct_worst = { max = 10 }
    settling_time_s_longest = { max = "20m" }
    steady_state_gain = [0.99, 1.01]      # [min, max]

    [systems.lp4]                # name -> one system form (as in a system file) + run options
    design = { family = "butterworth", kind = "lowpass", order = 4, cutoff_hz = "1k" }
    method = "bilinear"
    prewarp_hz = "1k"
    limits = { overshoot_pct_worst = { max = 12 } }   # overrides [limits] for this system

    [systems.sensor]
    file = "systems/sensor.toml" # a system file instead of an inline form

    [systems]
    rc = "2*pi*100/(s + 2*pi*100)"   # short form: H(s) text (or ODE text, with "=")

    [[inputs]]
    files = ["recordings/*.csv", "extra/run7.csv"]   # paths and globs (** allowed)
    rate_hz = "10k"              # reader options: rate_hz channels dataset format time_column
                                 # resample fill_gaps delimiter decimal header_line
                                 # skip_lines full_scale offset units

    [[inputs]]
    signal = "step:rate=10k,duration=50m,time=5m"   # generated signals (text or list)
    name = "step"                # optional: its {input} name in output names

A system entry holds one system form (``expression``, ``ode``, ``coefficients``,
``zpk``, ``design``, with ``name``, ``notes``, ``dead_time_s``: the keys of a system
file) or ``file``, plus run options as ``simwave run`` has them: ``method``,
``initial`` ("rest"/"settled"), ``prewarp_hz``, ``match_hz``, ``initial_output``,
``oversample``, ``keep_going``; and ``limits``. System names become part of the
output file names (letters, digits, ``. _ = -``).
"""

from __future__ import annotations

import glob
import hashlib
import json
import math
import os
import re
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

from simwave.batch.lines import KeyLines
from simwave.errors import BatchError, SimwaveError
from simwave.tomlfile import read_toml
from simwave.vocabulary import warn_renamed


#: Top-level tables of a description file.
SECTIONS = ("batch", "output", "measure", "limits", "systems", "inputs")
BATCH_KEYS = ("jobs", "scheduler", "connect_timeout_s")
OUTPUT_KEYS = ("dir", "format", "name", "summary", "include_input", "write")
WRITE_KEYS = ("subtype", "on_clip", "normalize_level_dbfs", "full_scale", "offset", "dtype",
              "compression", "delimiter", "time_column", "dataset")
#: Run options a system entry may carry besides its form.
RUN_KEYS = ("method", "initial", "prewarp_hz", "match_hz", "initial_output", "output_ics",
            "oversample",
            "keep_going")
SYSTEM_EXTRA_KEYS = RUN_KEYS + ("file", "limits")
#: Reader options an input entry may carry (rate and channels go to the run itself).
READ_KEYS = ("rate_hz", "rate", "channels", "dataset", "format", "time_column", "resample",
             "fill_gaps",
             "delimiter", "decimal", "header_line", "skip_lines", "full_scale", "offset", "units")
INPUT_KEYS = ("files", "signal", "name") + READ_KEYS
#: Measurement options a description may set (the rest are internal to simwave.measure).
MEASURE_KEYS = ("reference_levels_pct", "settling_band_pct", "harmonics", "sine_hz",
                "tones_hz", "steady_fraction", "state_level_method", "signal_kind",
                "reference_channel", "gain_tolerance_db", "phase_tolerance_deg",
                "overshoot_tolerance_pct", "time_tolerance_pct")
#: Summary metrics from the run report that limits may also apply to.
RUN_METRICS = ("record_peak", "record_rms", "samples", "duration_s")
NAME_FIELDS = ("input", "system", "parent", "path", "index")
DEFAULT_OUTPUT_DIR = "batch-output"
DEFAULT_NAME = "{input}__{system}"
METRICS_SUFFIX = ".metrics.json"
#: The resume journal kept in the output directory.
JOURNAL_NAME = ".simwave-batch-journal.jsonl"


# ----------------------------------------------------------------------------- plan objects
@dataclass(frozen=True)
class SystemEntry:
    """A candidate system: its name, a picklable definition and its run options.

    ``definition`` is ``("text", text)`` (anything :meth:`System.parse` reads) or
    ``("table", mapping, where)`` (a system-file table for
    :func:`simwave.cli.system_input.system_from_mapping`).
    """

    name: str
    definition: tuple
    run_options: Mapping[str, Any]
    limits: Mapping[str, tuple]
    definition_file: str | None = None
    line: int | None = None


@dataclass(frozen=True)
class InputEntry:
    """One input: a file path (absolute) or a generated-signal text, with reader options."""

    label: str
    source: str
    stem: str
    parent: str
    relpath: str
    is_file: bool
    rate: float | None
    channels: tuple | None
    read_options: Mapping[str, Any]
    ext: str
    where: str


@dataclass(frozen=True)
class Pair:
    """One (input, system) run of the batch and the files it produces."""

    index: int
    input: InputEntry
    system: SystemEntry
    output: str
    metrics: str

    @property
    def label(self) -> str:
        return f"{self.input.label} x {self.system.name}"


@dataclass
class BatchPlan:
    """Everything a batch will do, checked: systems, inputs, pairs, options, engine."""

    description: str | None
    base_dir: str
    systems: list[SystemEntry]
    inputs: list[InputEntry]
    output_dir: str
    output_format: str
    name_template: str
    summary_stem: str
    include_input: bool
    write_options: dict[str, Any]
    measure_options: dict[str, Any]
    limits: dict[str, tuple]
    jobs: int | None = None
    scheduler: str | None = None
    connect_timeout_s: float = 10.0
    pairs: list[Pair] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)

    @property
    def summary_paths(self) -> tuple[str, str]:
        base = os.path.join(self.output_dir, self.summary_stem)
        return base + ".csv", base + ".json"

    @property
    def journal_path(self) -> str:
        return os.path.join(self.output_dir, JOURNAL_NAME)

    def job_fields(self, pair: Pair) -> dict[str, Any]:
        """The :class:`simwave.run.RunJob` fields of a pair, except ``system``."""
        opts = dict(pair.system.run_options)
        return {
            "source": pair.input.source,
            "output": pair.output,
            "method": opts.get("method", "ramp-invariant"),
            "initial": opts.get("initial", "rest"),
            "prewarp_hz": opts.get("prewarp_hz"),
            "match_hz": opts.get("match_hz"),
            "initial_output": opts.get("initial_output"),
            "oversample": opts.get("oversample", 1),
            "channels": pair.input.channels,
            "rate": pair.input.rate,
            "read_options": dict(pair.input.read_options),
            "write_options": dict(self.write_options),
            "include_input": self.include_input,
            "keep_going": opts.get("keep_going", False),
            "metrics": pair.metrics,
            "measure_options": dict(self.measure_options),
        }

    def fingerprint(self, pair: Pair) -> str:
        """A digest of everything that decides a pair's output (its definition, not its data).

        The resume check compares it with the digest recorded when the pair
        finished, so a changed system, method or option redoes the pair even
        when the files are newer than the inputs.
        """
        job = self.job_fields(pair)
        job.pop("output")
        job.pop("metrics")
        text = json.dumps({"system": pair.system.definition, "job": job}, sort_keys=True,
                          default=str)
        return hashlib.sha256(text.encode("utf-8")).hexdigest()[:32]


# ----------------------------------------------------------------------------- small checks
def _fail(where: str, message: str) -> BatchError:
    return BatchError(f"{where}: {message}")


def _quantity(value: Any, what: str, where: str) -> float:
    from simwave.signals.quantity import parse_quantity

    if isinstance(value, bool):
        raise _fail(where, f"{what} must be a number, got {value!r}")
    try:
        return float(parse_quantity(value, what))
    except SimwaveError as exc:
        raise _fail(where, str(exc)) from None


def _bool(value: Any, what: str, where: str) -> bool:
    if not isinstance(value, bool):
        raise _fail(where, f"{what} must be true or false, got {value!r}")
    return value


def _text(value: Any, what: str, where: str) -> str:
    if not isinstance(value, str) or not value.strip():
        raise _fail(where, f"{what} must be non-empty text, got {value!r}")
    return value


def _check_keys(table: Any, known: Sequence[str], section: str, lines: KeyLines | None,
                source: str, path: Sequence[str | int]) -> None:
    if not isinstance(table, Mapping):
        raise _fail(source, f"{section} must be a table, got {table!r}")
    for key in table:
        if key not in known:
            where = lines.where(source, key, path) if lines else source
            raise BatchError(
                f"{where}: unknown key {key!r} in {section} (known: {', '.join(known)})"
            )


def _safe_stem(text: str) -> str:
    """A file-name-safe stem: letters, digits and ``._=-``; everything else becomes ``_``."""
    stem = re.sub(r"[^A-Za-z0-9._=-]+", "_", text).strip("._")
    return stem[:120] or "input"


def glob_regex(pattern: str) -> re.Pattern[str]:
    """A regular expression matching the paths :func:`glob.glob` (recursive) would match.

    ``**`` spans directories, ``*`` and ``?`` stay within one, ``[...]`` is a
    class (``[!...]`` negated); separators are ``/`` after normalization.
    """
    pat = pattern.replace(os.sep, "/")
    out = []
    i = 0
    while i < len(pat):
        c = pat[i]
        if pat.startswith("**/", i):
            out.append(r"(?:.*/)?")
            i += 3
        elif pat.startswith("**", i):
            out.append(r".*")
            i += 2
        elif c == "*":
            out.append(r"[^/]*")
            i += 1
        elif c == "?":
            out.append(r"[^/]")
            i += 1
        elif c == "[":
            j = pat.find("]", i + 2)
            if j < 0:
                out.append(re.escape(c))
                i += 1
            else:
                body = pat[i + 1 : j]
                if body.startswith("!"):
                    body = "^" + body[1:]
                out.append("[" + body.replace("\\", "\\\\") + "]")
                i = j + 1
        else:
            out.append(re.escape(c))
            i += 1
    return re.compile("".join(out) + r"\Z")


def _norm(path: str) -> str:
    return os.path.normcase(os.path.abspath(path)).replace(os.sep, "/")


# ----------------------------------------------------------------------------- systems
def _check_method(value: Any, where: str) -> str:
    from simwave.discrete.methods import METHODS

    name = str(value).strip().lower()
    if name not in METHODS:
        raise _fail(where, f"unknown method {value!r} (known: {', '.join(METHODS)})")
    return name


def run_options(table: Mapping[str, Any], where_of: Callable[[str], str]) -> dict[str, Any]:
    """Checked run options (method, initial, prewarp_hz, ...) from a system entry.

    ``where_of(key)`` gives the place of a key for error messages.
    """
    opts: dict[str, Any] = {}
    if "method" in table:
        opts["method"] = _check_method(table["method"], where_of("method"))
    if "initial" in table:
        if table["initial"] not in ("rest", "settled"):
            raise _fail(where_of("initial"),
                        f"initial must be \"rest\" or \"settled\", got {table['initial']!r}")
        opts["initial"] = table["initial"]
    for key in ("prewarp_hz", "match_hz"):
        if key in table:
            v = _quantity(table[key], key, where_of(key))
            if not (v > 0 and math.isfinite(v)):
                raise _fail(where_of(key), f"{key} must be a positive frequency, "
                                           f"got {table[key]!r}")
            opts[key] = v
    if "output_ics" in table:  # the old spelling, kept for one release
        if "initial_output" in table:
            raise _fail(where_of("output_ics"), "output_ics and initial_output are the same "
                                                "key; give initial_output only")
        warn_renamed(f"{where_of('output_ics')}: output_ics", "initial_output")
        table = {**table, "initial_output": table["output_ics"]}
    if "initial_output" in table:
        raw = table["initial_output"]
        key = "initial_output" if "output_ics" not in table else "output_ics"
        if not isinstance(raw, list):
            raise _fail(where_of(key), f"initial_output must be a list of numbers, got {raw!r}")
        opts["initial_output"] = tuple(_quantity(v, "initial_output", where_of(key))
                                       for v in raw)
    if "oversample" in table:
        v = table["oversample"]
        if isinstance(v, bool) or not isinstance(v, int) or not 1 <= v <= 64:
            raise _fail(where_of("oversample"),
                        f"oversample must be a whole number from 1 to 64, got {v!r}")
        opts["oversample"] = v
    if "keep_going" in table:
        opts["keep_going"] = _bool(table["keep_going"], "keep_going", where_of("keep_going"))
    return opts


def _read_toml_file(path: str, what: str) -> tuple[dict, str]:
    return read_toml(path, what, BatchError)


def system_file_table(path: str) -> dict:
    """A system file's table, named after the file when it has no name (as ``simwave run``)."""
    from simwave.cli.system_input import system_from_mapping

    data, _ = _read_toml_file(path, "system file")
    table = dict(data)
    table.setdefault("name", os.path.splitext(os.path.basename(path))[0])
    system_from_mapping(table, where=path)  # check it now: bad systems stop the batch early
    return table


def build_system(definition: tuple):
    """The :class:`simwave.System` of a :attr:`SystemEntry.definition` (run in the worker)."""
    from simwave.cli.system_input import system_from_mapping
    from simwave.model.system import System

    if definition[0] == "text":
        return System.parse(definition[1])
    if definition[0] == "design":
        from simwave.cli.system_input import parse_design_text

        return parse_design_text(definition[1])
    return system_from_mapping(definition[1], where=definition[2])


#: ``NAME=SYSTEM`` on the command line: a plain name, then the system text.
_NAMED = re.compile(r"^\s*([A-Za-z][A-Za-z0-9._-]*)\s*=(?!=)\s*(\S.*)$", re.S)


def split_name(text: str) -> tuple[str | None, str]:
    """``"lp=1/(s+1)"`` -> ``("lp", "1/(s+1)")``; text without a leading ``NAME=`` ->
    ``(None, text)``. ODE text (``y'' + y = x``) has no plain name before its ``=``;
    ``y`` and ``x`` alone are never taken as names."""
    m = _NAMED.match(text)
    if not m or m.group(1) in ("y", "x"):
        return None, text
    return m.group(1), m.group(2).strip()


def _limits(table: Any, where_of, path: Sequence[str | int]) -> dict[str, tuple]:
    """``{metric: (min or None, max or None)}`` from a limits table."""
    from simwave.measure import key_metrics

    known = list(RUN_METRICS) + [
        k for k, v in key_metrics({"channels": [{"name": "x"}]})["x"].items() if k != "kind"
    ]
    if not isinstance(table, Mapping):
        raise _fail(where_of("limits", path[:-1]), f"limits must be a table, got {table!r}")
    out: dict[str, tuple] = {}
    for metric, band in table.items():
        where = where_of(metric, path)
        if metric not in known:
            raise _fail(where, f"unknown metric {metric!r} in limits (known: {', '.join(known)})")
        if isinstance(band, list) and len(band) == 2:
            lo, hi = band
        elif isinstance(band, Mapping):
            for k in band:
                if k not in ("min", "max"):
                    raise _fail(where, f"unknown key {k!r} in the limits of {metric} "
                                       "(known: min, max)")
            lo, hi = band.get("min"), band.get("max")
        else:
            raise _fail(where, f"limits of {metric} must be {{ min = ..., max = ... }} or "
                               f"[min, max], got {band!r}")
        lo_v = None if lo is None or lo == "" else _quantity(lo, f"{metric} min", where)
        hi_v = None if hi is None or hi == "" else _quantity(hi, f"{metric} max", where)
        if lo_v is None and hi_v is None:
            raise _fail(where, f"limits of {metric}: give min, max or both")
        if lo_v is not None and hi_v is not None and lo_v > hi_v:
            raise _fail(where, f"limits of {metric}: min {lo_v:g} is above max {hi_v:g}")
        out[metric] = (lo_v, hi_v)
    return out


def _system_entries(systems: Any, base: str, source: str, lines: KeyLines) -> list[SystemEntry]:
    from simwave.cli.system_input import EXTRA_KEYS, FORMS, system_from_mapping

    if not isinstance(systems, Mapping) or not systems:
        raise _fail(source, "[systems] must name at least one system, e.g. "
                            "[systems.lp] expression = \"1/(s+1)\"")
    entries = []
    known = FORMS + EXTRA_KEYS + SYSTEM_EXTRA_KEYS

    def where_of(key: str, path: Sequence[str | int]) -> str:
        return lines.where(source, key, path)

    for name, table in systems.items():
        where = where_of(name, ["systems"])
        line = lines.line_of(name, ["systems"])
        if not re.fullmatch(r"[A-Za-z0-9._=-]+", name):
            raise _fail(where, f"system name {name!r}: use letters, digits and . _ = - only "
                               "(it becomes part of file names)")
        if isinstance(table, str):
            table = {"expression": table} if "=" not in table else {"ode": table}
        _check_keys(table, known, f"[systems.{name}]", lines, source, ["systems", name])
        opts = run_options(table, lambda key, name=name: where_of(key, ["systems", name]))
        limits = _limits(table["limits"], where_of, ["systems", name, "limits"]) \
            if "limits" in table else {}
        form = {k: v for k, v in table.items() if k in FORMS + EXTRA_KEYS}
        definition_file = None
        if "file" in table:
            if form:
                raise _fail(where, f"[systems.{name}] has file = and also {', '.join(form)}; "
                                   "give one or the other")
            path = os.path.join(base, _text(table["file"], "file", where))
            try:
                form = system_file_table(path)
            except SimwaveError as exc:
                raise _fail(where_of("file", ["systems", name]), str(exc)) from None
            definition_file = os.path.abspath(path)
            definition = ("table", form, path)
        else:
            form.setdefault("name", name)
            label = f"{source}, [systems.{name}]"
            try:
                system_from_mapping(form, where=label)
            except SimwaveError as exc:
                msg = str(exc)
                m = re.search(r"unknown key '([^']+)'", msg)
                k = re.match(re.escape(label) + r", (\w+):", msg)
                line_no = (lines.line_of(m.group(1), ["systems", name]) if m else
                           lines.line_of(k.group(1), ["systems", name]) if k else line)
                if line_no is not None and msg.startswith(label):
                    msg = f"{source}, line {line_no}, [systems.{name}]" + msg[len(label):]
                raise BatchError(msg) from None
            definition = ("table", form, label)
        entries.append(SystemEntry(name, definition, opts, limits, definition_file, line))
    return entries


# ----------------------------------------------------------------------------- inputs
def _reader_options(table: Mapping[str, Any], where_of: Callable[[str], str]
                    ) -> tuple[float | None, tuple | None, dict[str, Any]]:
    rate = None
    if "rate" in table and "rate_hz" not in table:
        warn_renamed(f"{where_of('rate')}: rate", "rate_hz")  # old spelling, one release
    for key in ("rate_hz", "rate"):
        if key in table:
            rate = _quantity(table[key], key, where_of(key))
            if not (rate > 0 and math.isfinite(rate)):
                raise _fail(where_of(key), f"{key} must be > 0 Hz, got {table[key]!r}")
            break
    channels = None
    if "channels" in table:
        raw = table["channels"]
        if isinstance(raw, str):
            raw = [c.strip() for c in raw.split(",") if c.strip()]
        if isinstance(raw, int) and not isinstance(raw, bool):
            raw = [raw]
        if not isinstance(raw, list) or not raw or any(
                isinstance(c, bool) or not isinstance(c, (str, int)) for c in raw):
            raise _fail(where_of("channels"),
                        f"channels must be names or indices, got {table['channels']!r}")
        channels = tuple(raw)
    read = {k: table[k] for k in READ_KEYS if k in table and k not in ("rate", "rate_hz",
                                                                       "channels")}
    if "fill_gaps" in read:
        v = read["fill_gaps"]
        if isinstance(v, bool) or not isinstance(v, int) or v < 0:
            raise _fail(where_of("fill_gaps"), f"fill_gaps must be a whole number >= 0, got {v!r}")
    if "resample" in read:
        _bool(read["resample"], "resample", where_of("resample"))
    return rate, channels, read


def _probe_signal(spec: str, where: str) -> None:
    """Generate the first few samples of a signal text now, so a bad parameter stops the batch."""
    from simwave.signals.generate import generate
    from simwave.signals.spec import parse_signal_spec

    try:
        kind, g_rate, duration, params = parse_signal_spec(spec)
        if g_rate is None or duration is None:
            raise BatchError(f"signal {spec!r}: give rate= and duration= in the text")
        generate(kind, g_rate, min(duration, 8.0 / g_rate), **params)
    except SimwaveError as exc:
        raise _fail(where, str(exc)) from None


def _has_magic(text: str) -> bool:
    return any(c in text for c in "*?[")


def _input_entries(inputs: Any, base: str, source: str, lines: KeyLines | None,
                   notes: list[str]) -> tuple[list[InputEntry], list[tuple[str, str]]]:
    """Inputs expanded (globs sorted), and the glob patterns used (for the output-dir check)."""
    from simwave.signals.spec import is_signal_spec

    if isinstance(inputs, Mapping):
        inputs = [inputs]
    if not isinstance(inputs, list) or not inputs:
        raise _fail(source, "give at least one [[inputs]] table with files = [...] or "
                            "signal = \"...\"")
    entries: list[InputEntry] = []
    patterns: list[tuple[str, str]] = []
    seen: set[tuple] = set()  # a file matched twice with the same options is one input
    for n, table in enumerate(inputs):
        path = ["inputs", n]
        _check_keys(table, INPUT_KEYS, "[[inputs]]", lines, source, path)

        def where_of(key: str, path=path) -> str:
            return lines.where(source, key, path) if lines else source

        if ("files" in table) == ("signal" in table):
            raise _fail(where_of("files" if "files" in table else "signal"),
                        "each [[inputs]] table needs files = [...] or signal = \"...\" "
                        "(one of them)")
        rate, channels, read = _reader_options(table, where_of)
        if "signal" in table:
            odd = [k for k in READ_KEYS if k in table and k != "channels"]
            if odd:
                raise _fail(where_of(odd[0]), f"{odd[0]} is a file reader option; a generated "
                                              "signal takes rate= and its settings in its text")
            specs = table["signal"] if isinstance(table["signal"], list) else [table["signal"]]
            name = table.get("name")
            if name is not None and len(specs) > 1:
                raise _fail(where_of("name"), "name = applies to a single signal; "
                                             "give each signal its own [[inputs]] table")
            for spec in specs:
                w = where_of("signal")
                spec = _text(spec, "signal", w)
                _probe_signal(spec, w)
                if not is_signal_spec(spec):
                    raise _fail(w, f"{spec!r} is an existing file's name; list it under files")
                stem = _safe_stem(name if name is not None else spec)
                entries.append(InputEntry(spec, spec, stem, "generated", stem, False, rate,
                                          channels, read, ".csv", w))
            continue
        if "name" in table:
            raise _fail(where_of("name"), "name = is for a generated signal; file inputs are "
                                          "named after their files")
        files = table["files"]
        files = [files] if isinstance(files, str) else files
        if not isinstance(files, list) or not files:
            raise _fail(where_of("files"), f"files must be a path, a glob or a list of them, "
                                          f"got {table['files']!r}")
        for item in files:
            w = where_of("files")
            item = _text(item, "files", w)
            full = os.path.join(base, os.path.expanduser(item))
            if _has_magic(item):
                patterns.append((full, f"{w}: {item!r}"))
                found = sorted(p for p in glob.glob(full, recursive=True) if os.path.isfile(p))
                if not found:
                    notes.append(f"{w}: {item!r} matches no file")
                    continue
            else:
                if not os.path.exists(full):
                    raise _fail(w, f"input file {item} not found (looked for {full})")
                if os.path.isdir(full):
                    raise _fail(w, f"{item} is a directory; give a glob such as "
                                   f"{os.path.join(item, '*.csv')!r}")
                found = [full]
            for p in found:
                absp = os.path.abspath(p)
                key = (_norm(absp), rate, channels, json.dumps(read, sort_keys=True, default=str))
                if key in seen:
                    continue
                seen.add(key)
                try:
                    label = os.path.relpath(absp, base)
                except ValueError:  # another drive (Windows)
                    label = absp
                stem, ext = os.path.splitext(os.path.basename(absp))
                parent = os.path.basename(os.path.dirname(absp)) or "root"
                entries.append(InputEntry(label, absp, stem, parent,
                                          _safe_stem(os.path.splitext(label)[0].replace(
                                              "..", "up")), True,
                                          rate, channels, read, ext.lower(), w))
    if not entries:
        if notes:  # each note names its own place
            raise BatchError("no input at all: " + "; ".join(notes))
        raise _fail(source, "no input at all")
    return entries, patterns


# ----------------------------------------------------------------------------- outputs
def _output_ext(fmt: str, where: str) -> str | None:
    """File extension for an output format (None for "same": the input's own)."""
    from simwave.signals.formats import resolve_format

    key = str(fmt).strip().lower().lstrip(".")
    if key == "same":
        return None
    if key in ("hdf5", "h5", "hdf"):
        return ".h5"
    if key in ("csv", "txt", "tsv", "dat", "text"):
        return ".csv"
    try:
        resolve_format("x." + key, key)
    except SimwaveError:
        raise _fail(where, f"unknown output format {fmt!r}; use same, csv, h5 or an audio "
                           "format such as wav or flac") from None
    return "." + key


def _output_ext_for(entry: InputEntry, ext: str | None) -> str:
    if ext is not None:
        return ext
    from simwave.signals.formats import resolve_format

    try:
        resolve_format("x" + entry.ext)
    except SimwaveError:
        return ".csv"  # an input read with format = "..." under an odd extension
    return entry.ext


def _check_template(template: str, where: str) -> str:
    for name in re.findall(r"{([^{}]*)}", template):
        if name not in NAME_FIELDS:
            raise _fail(where, f"unknown field {{{name}}} in name (known: "
                               + ", ".join("{" + f + "}" for f in NAME_FIELDS) + ")")
    if "{system}" not in template:
        raise _fail(where, "name must contain {system}, or the systems would share one file")
    if "/" in template or "\\" in template:
        raise _fail(where, "name is a file name, without directories")
    return template


def make_pairs(plan: BatchPlan, ext: str | None, patterns: Sequence[tuple[str, str]]) -> None:
    """Fill ``plan.pairs``; refuse duplicate names, outputs over inputs or in an input glob."""
    seen: dict[str, str] = {}
    summary_csv, summary_json = plan.summary_paths
    reserved = {_norm(summary_csv): "the summary table", _norm(summary_json): "the summary JSON",
                _norm(plan.journal_path): "the batch journal"}
    inputs_by_path = {_norm(e.source): e for e in plan.inputs if e.is_file}
    pairs = []
    index = 0
    for entry in plan.inputs:
        for system in plan.systems:
            stem = plan.name_template.format(input=entry.stem, system=system.name,
                                             parent=_safe_stem(entry.parent), path=entry.relpath,
                                             index=index)
            stem = _safe_stem(stem)
            output = os.path.join(plan.output_dir, stem + _output_ext_for(entry, ext))
            metrics = os.path.join(plan.output_dir, stem + METRICS_SUFFIX)
            for target in (output, metrics):
                key = _norm(target)
                what = f"{entry.label} with {system.name}"
                if key in reserved:
                    raise BatchError(f"output name {os.path.basename(target)} ({what}) is the "
                                     f"same as {reserved[key]}; change [output] name or summary")
                if key in seen:
                    raise BatchError(
                        f"duplicate output name {os.path.basename(target)}: made by {seen[key]} "
                        f"and by {what}; put {{parent}} or {{path}} in the name template "
                        "([output] name, or --name) to tell them apart"
                    )
                seen[key] = what
                if key in inputs_by_path:
                    raise BatchError(f"output {target} ({what}) would overwrite the input "
                                     f"{inputs_by_path[key].label}")
            pairs.append(Pair(index, entry, system, output, metrics))
            index += 1
    # Outputs that an input glob would pick up on the next run: refuse (the batch would
    # feed on its own outputs).
    out_dir = _norm(plan.output_dir)
    for pattern, where in patterns:
        rx = glob_regex(_norm(pattern))
        hit = next((p for p in pairs for t in (p.output, p.metrics) if rx.match(_norm(t))), None)
        if hit is not None:
            raise BatchError(
                f"{where}: the output directory {plan.output_dir} is inside this input "
                f"pattern ({os.path.basename(hit.output)} would be read as an input next time); "
                "choose an output directory outside it"
            )
    for entry in plan.inputs:
        if entry.is_file and any(
            rx.match(_norm(entry.source)) for rx in (glob_regex(_norm(p)) for p, _ in patterns)
        ) and (_norm(entry.source) + "/").startswith(out_dir + "/"):
            raise BatchError(
                f"{entry.where}: input {entry.label} lies in the output directory "
                f"{plan.output_dir}; choose an output directory outside the inputs' globs"
            )
    plan.pairs = pairs


# ----------------------------------------------------------------------------- entry points
def _measure_options(table: Any, lines: KeyLines | None, source: str) -> dict[str, Any]:
    if table is None:  # nothing to check: the measuring code (slow to import) stays unloaded
        return {}
    from simwave.measure import MeasureOptions

    _check_keys(table, MEASURE_KEYS, "[measure]", lines, source, ["measure"])
    opts = dict(table)
    for key in ("sine_hz",):
        if key in opts:
            opts[key] = _quantity(opts[key], key, lines.where(source, key, ["measure"])
                                  if lines else source)
    if "tones_hz" in opts:
        w = lines.where(source, "tones_hz", ["measure"]) if lines else source
        if not isinstance(opts["tones_hz"], list):
            raise _fail(w, f"tones_hz must be a list of frequencies, got {opts['tones_hz']!r}")
        opts["tones_hz"] = [_quantity(v, "tones_hz", w) for v in opts["tones_hz"]]
    head = lines.header_line(["measure"]) if lines else None
    where = f"{source}, line {head} ([measure])" if head else f"{source}, [measure]"
    try:
        MeasureOptions.from_kwargs(dict(opts))
    except SimwaveError as exc:
        raise _fail(where, str(exc)) from None
    except (TypeError, ValueError) as exc:
        raise _fail(where, f"invalid option value ({exc})") from None
    return opts


def _jobs(value: Any, where: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise _fail(where, f"jobs must be a whole number >= 1, got {value!r}")
    return value


def load_description(path: str | os.PathLike[str], *, output_dir: str | None = None) -> BatchPlan:
    """Read and check a batch description file; return the complete plan.

    Parameters
    ----------
    path : str or path-like
        The TOML description (schema in the module docstring).
    output_dir : str, optional
        Overrides ``[output] dir`` (relative to the current directory).

    Returns
    -------
    BatchPlan
        Systems built and checked, globs expanded, pairs with their output names.
        Globs that match nothing are listed in ``plan.warnings``.

    Raises
    ------
    BatchError
        Unknown keys (with the line), bad values, no input at all, duplicate
        output names, an output directory inside an input glob.
    """
    source = os.fspath(path)
    data, text = _read_toml_file(source, "batch description")
    lines = KeyLines(text)
    base = os.path.dirname(os.path.abspath(source))
    for key in data:
        if key not in SECTIONS:
            raise BatchError(f"{lines.where(source, key)}: unknown key {key!r} "
                             f"(known: {', '.join(SECTIONS)})")
    batch = data.get("batch", {})
    _check_keys(batch, BATCH_KEYS, "[batch]", lines, source, ["batch"])
    out = data.get("output", {})
    _check_keys(out, OUTPUT_KEYS, "[output]", lines, source, ["output"])
    write = out.get("write", {})
    _check_keys(write, WRITE_KEYS, "[output] write", lines, source, ["output", "write"])
    notes: list[str] = []
    systems = _system_entries(data.get("systems"), base, source, lines)
    inputs, patterns = _input_entries(data.get("inputs"), base, source, lines, notes)

    def w(key: str, sec: str) -> str:
        return lines.where(source, key, [sec])

    jobs = _jobs(batch["jobs"], w("jobs", "batch")) if "jobs" in batch else None
    scheduler = _text(batch["scheduler"], "scheduler", w("scheduler", "batch")) \
        if "scheduler" in batch else None
    timeout = 10.0
    if "connect_timeout_s" in batch:
        timeout = _quantity(batch["connect_timeout_s"], "connect_timeout_s",
                            w("connect_timeout_s", "batch"))
        if not timeout > 0:
            raise _fail(w("connect_timeout_s", "batch"), "connect_timeout_s must be > 0")
    if output_dir is not None:
        out_dir = os.path.abspath(output_dir)
    else:
        out_dir = os.path.join(base, _text(out.get("dir", DEFAULT_OUTPUT_DIR), "dir",
                                           w("dir", "output")))
    ext = _output_ext(out.get("format", "same"), w("format", "output"))
    template = _check_template(_text(out.get("name", DEFAULT_NAME), "name", w("name", "output")),
                               w("name", "output"))
    summary = _safe_stem(_text(out.get("summary", "summary"), "summary", w("summary", "output")))
    include_input = _bool(out["include_input"], "include_input", w("include_input", "output")) \
        if "include_input" in out else False
    limits = _limits(data["limits"], lambda k, p: lines.where(source, k, p), ["limits"]) \
        if "limits" in data else {}
    plan = BatchPlan(
        description=os.path.abspath(source), base_dir=base, systems=systems, inputs=inputs,
        output_dir=os.path.abspath(out_dir), output_format=out.get("format", "same"),
        name_template=template, summary_stem=summary, include_input=include_input,
        write_options=dict(write),
        measure_options=_measure_options(data.get("measure"), lines, source),
        limits=limits, jobs=jobs, scheduler=scheduler, connect_timeout_s=timeout,
        warnings=notes,
    )
    make_pairs(plan, ext, patterns)
    return plan


def quick_plan(systems: Sequence[str], inputs: Sequence[str], output_dir: str, *,
               method: str | None = None, output_format: str = "same",
               rate: Any = None, channels: Any = None,
               read_options: Mapping[str, Any] | None = None, name_template: str = DEFAULT_NAME,
               measure_options: Mapping[str, Any] | None = None,
               designs: Sequence[str] = ()) -> BatchPlan:
    """The plan of the command-line quick form ``simwave batch -s SYS ... INPUTS -o DIR``.

    Parameters
    ----------
    systems : sequence of str
        Each an H(s) or ODE text, or a system file (``.toml``), as ``-s`` of ``simwave run``,
        optionally ``NAME=`` first. Names (in output names and the summary): that NAME;
        else the file's stem; ``system1``, ``system2``, ... for texts (by position).
    designs : sequence of str
        Analog designs as ``--design`` texts (``[NAME=]butterworth lowpass order=4
        cutoff_hz=1k``), numbered after the ``systems``.
    inputs : sequence of str
        Paths, globs and generated-signal texts (relative to the current directory).
    output_dir : str
        Where outputs, metrics and the summary go.
    method, output_format, rate, channels, read_options, name_template, measure_options
        As the description file's keys.
    """
    from simwave.model.system import System

    if not systems and not designs:
        raise BatchError("give at least one system with -s or --design")
    entries = []
    opts = run_options({"method": method} if method else {}, lambda key: "--method")
    names: dict[str, str] = {}
    given = [("-s", t) for t in systems] + [("--design", t) for t in designs]
    for i, (flag, raw) in enumerate(given):
        own_name, text = split_name(raw)
        if flag == "--design":
            from simwave.cli.system_input import parse_design_text

            try:
                parse_design_text(text)
            except SimwaveError as exc:
                raise BatchError(f"--design {text!r}: {exc}") from None
            name = f"system{i + 1}"
            definition = ("design", text)
            def_file = None
        elif text.strip().lower().endswith(".toml"):
            table = system_file_table(text.strip())
            name = _safe_stem(os.path.splitext(os.path.basename(text.strip()))[0])
            definition: tuple = ("table", table, text.strip())
            def_file = os.path.abspath(text.strip())
        else:
            try:
                System.parse(text)
            except SimwaveError as exc:
                raise BatchError(f"-s {text!r}: {exc}") from None
            name = f"system{i + 1}"
            definition = ("text", text)
            def_file = None
        if own_name is not None:
            name = _safe_stem(own_name)
        if name in names:
            raise BatchError(f"two systems are named {name!r} ({names[name]} and {text}); "
                             "name them with NAME=SYSTEM")
        names[name] = text
        entries.append(SystemEntry(name, definition, opts, {}, def_file))
    table: dict[str, Any] = {"files": []}
    specs = []
    from simwave.signals.spec import is_signal_spec

    for item in inputs:
        (specs if is_signal_spec(item) else table["files"]).append(item)
    extra = dict(read_options or {})
    if rate is not None:
        extra["rate_hz"] = rate
    if channels is not None:
        extra["channels"] = channels
    tables = []
    if table["files"]:
        tables.append({**table, **extra})
    tables.extend({"signal": s, **extra} for s in specs)
    notes: list[str] = []
    if not tables:
        raise BatchError("give at least one input (files, globs or generated-signal texts)")
    cwd = os.getcwd()
    found, patterns = _input_entries(tables, cwd, "command line", None, notes)
    ext = _output_ext(output_format, "--format")
    plan = BatchPlan(
        description=None, base_dir=cwd, systems=entries, inputs=found,
        output_dir=os.path.abspath(output_dir), output_format=output_format,
        name_template=_check_template(name_template, "--name"), summary_stem="summary",
        include_input=False, write_options={},
        measure_options=_measure_options(dict(measure_options) if measure_options else None,
                                         None, "options"),
        limits={}, warnings=notes,
    )
    make_pairs(plan, ext, patterns)
    return plan
