"""The study's engine task: a chunk of builds, each run on every input and measured.

A :class:`BuildChunk` is plain picklable data; its :meth:`BuildChunk.run` is what
the batch engines (:mod:`simwave.batch.engines`: in-process, local pool, Dask) call
through :func:`simwave.batch.tasks.run_task`. Each build's system is made in the
worker from the system text and the build's values; each input is read once per
worker process and kept (inputs are demo-to-recording sized: the study runs the
same records many times), run through the build in memory and measured against
itself with :func:`simwave.measure.measure`. Nothing is written by the worker.

Failures are isolated per build and per input: a build whose values give an
unstable or improper (non-causal) H(s) is reported with the reason and not run;
an input that fails is recorded with its one-line message.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

from simwave.errors import SimwaveError

#: Inputs kept per worker process, by (source, reader options): the study's inputs.
_INPUTS: dict[str, Any] = {}
_MAX_CACHED_INPUTS = 64

#: Figures read from H(s) itself for every build (input-independent, exact).
MODEL_FIGURES = ("dc_gain", "bandwidth_3db_hz", "time_constant_s_slowest",
                 "natural_frequency_hz_dominant", "damping_ratio_dominant")


@dataclass(frozen=True)
class SystemTemplate:
    """The system text with parameter names, and how to run it (picklable)."""

    text: str
    kind: str  # "expression" or "ode"
    name: str
    dead_time_s: float = 0.0
    run_options: dict[str, Any] = field(default_factory=dict)

    def build(self, values: dict[str, float]):
        """The System for one set of parameter values (raises SimwaveError if none)."""
        from simwave.model.system import System

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # near cancellations: reported by inspect
            system = System.parse(self.text, name=self.name, expect=self.kind,
                                  parameters=values)
        if self.dead_time_s:
            system = system.with_delay(self.dead_time_s)
        return system


@dataclass(frozen=True)
class InputRef:
    """One study input: its label, source (path or signal text) and reader options."""

    label: str
    source: str
    read_options: dict[str, Any] = field(default_factory=dict)

    @property
    def key(self) -> str:
        import json

        return json.dumps([self.source, self.read_options], sort_keys=True, default=str)


def _number(v: Any) -> Any:
    """JSON-ready scalar: floats finite or None; ints and text as they are."""
    if isinstance(v, bool) or v is None or isinstance(v, str):
        return v
    if isinstance(v, int):
        return v
    try:
        x = float(v)
    except (TypeError, ValueError):
        return str(v)
    return x if math.isfinite(x) else None


def model_figures(system: Any) -> dict[str, Any]:
    """Figures of H(s) itself: DC gain, -3 dB bandwidth, slowest real time constant,
    natural frequency and damping ratio of the dominant (slowest-decaying) complex pair
    (Ogata, *Modern Control Engineering*, 5th ed., sec. 5-2 and 5-3; from memory)."""
    bw, _ = system.bandwidth_3db()
    real = [m for m in system.pole_modes() if m["kind"] == "real" and m["mode"] == "decaying"]
    pairs = [m for m in system.pole_modes() if m["kind"] == "pair" and m["mode"] == "decaying"]
    dom = min(pairs, key=lambda m: -m["pole"].real) if pairs else None
    return {
        "dc_gain": _number(system.dc_gain),
        "bandwidth_3db_hz": _number(bw),
        "time_constant_s_slowest": _number(max(m["time_constant_s"] for m in real))
        if real else None,
        "natural_frequency_hz_dominant": _number(dom["natural_frequency_hz"]) if dom else None,
        "damping_ratio_dominant": _number(dom["damping_ratio"]) if dom else None,
    }


def unstable_reason(system: Any) -> str | None:
    """Why a build cannot be run as a settling filter, or None when it is stable."""
    stability = system.stability
    if stability == "stable":
        return None
    bad = [p for p in system.poles if complex(p).real >= 0]
    shown = ", ".join(f"{complex(p).real:.6g}{complex(p).imag:+.6g}j" for p in bad[:4])
    where = "on the imaginary axis" if stability == "marginally stable" else \
        "in the right half-plane or on the axis"
    return f"{stability}: pole{'s' if len(bad) > 1 else ''} {shown} rad/s {where}"


def _input(ref: InputRef):
    from simwave.signals import read

    wf = _INPUTS.get(ref.key)
    if wf is None:
        if len(_INPUTS) >= _MAX_CACHED_INPUTS:
            _INPUTS.clear()
        wf = read(ref.source, **ref.read_options)
        _INPUTS[ref.key] = wf
    return wf


def run_build(template: SystemTemplate, values: dict[str, float], inputs: list[InputRef],
              measure_options: dict[str, Any], keep_waveforms: bool = False) -> dict[str, Any]:
    """Run one build on every input.

    Returns
    -------
    dict
        ``status`` ("ok", "unstable", "not realizable", "failed"), ``reason``,
        ``model`` (:data:`MODEL_FIGURES`), ``inputs`` ``{label: {status, error,
        metrics {channel: {metric: value}}}}``; with ``keep_waveforms`` also
        ``waveforms`` ``{label: (input, output)}`` (not picklable-small: local use).
    """
    from simwave.measure import key_metrics, measure
    from simwave.run import simulate

    out: dict[str, Any] = {"status": "ok", "reason": None, "model": {}, "inputs": {}}
    try:
        system = template.build(values)
    except SimwaveError as exc:
        out.update(status="not realizable", reason=str(exc))
        return out
    out["model"] = model_figures(system)
    reason = unstable_reason(system)
    if reason is not None:
        out.update(status="unstable", reason=reason)
        return out
    opts = dict(template.run_options)
    waves = {}
    for ref in inputs:
        entry: dict[str, Any] = {"status": "ok", "error": None, "metrics": {}}
        try:
            wf = _input(ref)
            y = simulate(system, wf, opts.get("method", "ramp-invariant"),
                         initial=opts.get("initial", "rest"),
                         prewarp_hz=opts.get("prewarp_hz"), match_hz=opts.get("match_hz"),
                         oversample=opts.get("oversample", 1))
            res = measure(y, reference=wf, system=system, **measure_options)
            entry["metrics"] = {ch: {k: _number(v) for k, v in m.items()}
                                for ch, m in key_metrics(res).items()}
            if keep_waveforms:
                waves[ref.label] = (wf, y)
        except SimwaveError as exc:
            entry.update(status="failed", error=str(exc))
        except Exception as exc:  # noqa: BLE001 - failure isolation: one input of one build
            entry.update(status="failed", error=f"{type(exc).__name__}: {exc}")
        out["inputs"][ref.label] = entry
    if any(e["status"] != "ok" for e in out["inputs"].values()):
        out["status"] = "failed"
        bad = next(e for e in out["inputs"].values() if e["status"] != "ok")
        out["reason"] = bad["error"]
    if keep_waveforms:
        out["waveforms"] = waves
    return out


@dataclass(frozen=True)
class BuildChunk:
    """Several builds for one engine task (amortizes the per-task cost of the engines)."""

    index: int
    template: SystemTemplate
    builds: tuple[tuple[int, dict[str, float]], ...]
    inputs: tuple[InputRef, ...]
    measure_options: dict[str, Any]

    def run(self, capture_warnings: bool = True) -> dict[str, Any]:
        """Run every build of the chunk; ``{"index", "status": "ok", "builds": {i: result}}``.

        Warnings are always recorded per build (``capture_warnings`` is accepted for the
        engines' calling convention): chunks run one at a time per process under the
        engines' lock, and the record must not depend on the engine.
        """
        results: dict[int, dict] = {}
        for build_index, values in self.builds:
            caught: list[str] = []
            try:
                with warnings.catch_warnings(record=True) as wl:
                    warnings.simplefilter("always")
                    r = run_build(self.template, values, list(self.inputs),
                                  self.measure_options)
                caught = sorted({str(w.message) for w in wl})
            except Exception as exc:  # noqa: BLE001 - failure isolation per build
                r = {"status": "failed", "reason": f"{type(exc).__name__}: {exc}",
                     "model": {}, "inputs": {}}
            r["warnings"] = caught
            results[build_index] = r
        return {"index": self.index, "status": "ok", "error": None, "builds": results}
