"""One value of a summary row as the page shows it: a number, a bound, or a gap with its reason.

The project's rule is that no value is shown with more confidence than the data
supports: a value the measurement could only bound is shown as a bound
(``≥ 0.18 s``), and a missing value is shown as missing *with its reason*. The
summary and metrics JSON are read as written, and read generically, because the
measurement's keys may grow: a cell may be

* a plain number, text, true/false or null;
* a dictionary holding the value and what qualifies it, e.g.
  ``{"value": 0.18, "bound": "lower", "reason": "..."}``;
* a number with its qualifiers in sibling keys of the row: ``<column>_bound``,
  ``<column>_reason``, or ``bounds`` / ``null_reasons`` dictionaries keyed by column.

A null with no reason in the row is looked up in the pair's metrics file (every
``null_reasons`` dictionary under the channel), then explained from the row
itself (a sine column in a transitions record, a settling time of a transition
that never settled). Only when none of these says why does the page say that no
reason was recorded — it never invents one.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping

#: Words a file may use for a lower or an upper bound, and the sign shown for each.
LOWER_WORDS = {"lower", "lower bound", "at least", ">=", "\u2265", "min", "minimum", "ge"}
UPPER_WORDS = {"upper", "upper bound", "at most", "<=", "\u2264", "max", "maximum", "le"}
#: Keys under which a value's bound kind may be given.
BOUND_KEYS = ("bound", "bound_kind", "relation", "is_bound")
#: Keys under which a value's reason may be given.
REASON_KEYS = ("reason", "null_reason", "note", "why")
#: Column suffixes that summarize a per-transition or per-tone quantity.
SUMMARY_SUFFIXES = ("_mean", "_worst", "_longest", "_first", "_largest", "_slowest",
                    "_fastest")
#: Summary columns that exist only for a measured sine (a steady tone).
SINE_COLUMNS = {"frequency_hz", "gain_db", "phase_deg", "predicted_gain_db",
                "predicted_phase_deg", "thd_pct", "sinad_db"}
#: Summary columns that exist only for records with transitions.
TRANSITION_COLUMNS = {"rise_time_s_mean", "fall_time_s_mean", "overshoot_pct_worst",
                      "undershoot_pct_worst", "preshoot_pct_worst", "settling_time_s_longest",
                      "delay_s_mean", "peak_time_s_first"}


@dataclass(frozen=True)
class Cell:
    """One value as the page shows it.

    Attributes
    ----------
    raw : Any
        The value exactly as the summary holds it (what the table's ``data-v`` carries).
    value : Any
        The number or text inside it (None for a gap).
    bound : str
        ``""`` (a measured value), ``"lower"`` (the true value is at least this) or
        ``"upper"`` (at most this).
    reason : str or None
        Why the value is missing or only a bound (None: no qualifier).
    """

    raw: Any
    value: Any
    bound: str = ""
    reason: str | None = None

    @property
    def missing(self) -> bool:
        return self.value is None or (isinstance(self.value, float) and math.isnan(self.value))


def bound_kind(word: Any) -> str:
    """``"lower"``, ``"upper"``, ``"both"`` or ``""`` for the ways a file may say which bound
    a value is (``"both"``: bounded on both sides, shown as approximate)."""
    if word is True:
        return "lower"  # a bare flag: the measurement's bounds are lower bounds (still moving)
    text = str(word or "").strip().lower()
    if "lower" in text and "upper" in text:
        return "both"
    if text in LOWER_WORDS or text.startswith("lower") or text.startswith("at least"):
        return "lower"
    if text in UPPER_WORDS or text.startswith("upper") or text.startswith("at most"):
        return "upper"
    return ""


def _first(mapping: Mapping[str, Any], keys: tuple[str, ...]) -> Any:
    for k in keys:
        if mapping.get(k) not in (None, ""):
            return mapping[k]
    return None


def read_cell(row: Mapping[str, Any], column: str,
              reasons: Mapping[str, str] | None = None) -> Cell:
    """The value of ``column`` in ``row``, with its bound and reason.

    Parameters
    ----------
    row : mapping
        One summary row, as in ``summary.json``.
    column : str
        The column.
    reasons : mapping, optional
        Null reasons found in the pair's metrics file (:func:`null_reasons_in`).
    """
    raw = row.get(column)
    value, bound, reason = raw, "", None
    if isinstance(raw, Mapping):
        value = raw.get("value")
        bound = bound_kind(_first(raw, BOUND_KEYS))
        reason = _first(raw, REASON_KEYS)
    bound = bound or bound_kind(row.get(f"{column}_bound"))
    for holder in ("bounds", "bound_kinds"):
        if not bound:
            bound = bound_kind(_keyed(row.get(holder), "bounds").get(column))
    reason = reason or row.get(f"{column}_reason")
    for holder in ("null_reasons", "missing"):
        if not reason:
            reason = _keyed(row.get(holder), "missing").get(column)
    cell = Cell(raw, value, bound, reason)
    if cell.missing and not reason:
        reason = _reason_from_metrics(column, reasons) or _reason_from_row(row, column)
        cell = Cell(raw, value, bound, reason)
    return cell


def _keyed(value: Any, what: str) -> Mapping[str, Any]:
    """A row's per-column qualifiers as a mapping: given as one, or as the text the key
    metrics write (``bounds``: ``"settling_time_s_longest lower; ..."``, ``missing``:
    ``"gain_db: no sine found; ..."``, read by the measurement's own parsers)."""
    if isinstance(value, Mapping):
        return value
    if not isinstance(value, str) or not value.strip():
        return {}
    from simwave.measure import result as measured

    parse = measured.key_bounds if what == "bounds" else measured.key_missing
    return parse({what: value})


def _base_names(column: str) -> list[str]:
    names = [column]
    for suffix in SUMMARY_SUFFIXES:
        if column.endswith(suffix):
            names.append(column[: -len(suffix)])
    if column.startswith("predicted_"):
        names.append(column[len("predicted_"):])
    return names


def _reason_from_metrics(column: str, reasons: Mapping[str, str] | None) -> str | None:
    if not reasons:
        return None
    for name in _base_names(column):
        if reasons.get(name):
            return str(reasons[name])
    return None


def _reason_from_row(row: Mapping[str, Any], column: str) -> str | None:
    """A reason the row itself gives (its status, its kind, its unsettled transitions)."""
    status = row.get("status")
    if status and status != "ok":
        return f"pair {status}" + (f": {row['error']}" if row.get("error") else "")
    kind = row.get("kind")
    if column == "settling_time_s_longest" and (row.get("not_settled") or 0) > 0:
        return (f"{row['not_settled']} transition(s) never settled within the band before "
                "the record or the next transition ended")
    if column in SINE_COLUMNS and kind and kind != "sine":
        return f"not measured: a {kind} record has no single steady tone"
    if column in TRANSITION_COLUMNS and not (row.get("transitions") or 0):
        return f"not measured: no transitions in this {kind or ''} record".replace("  ", " ")
    if column == "tone_gain_error_db_worst" and kind != "multitone":
        return "not measured: no multi-tone input"
    return None


def null_reasons_in(channel: Mapping[str, Any],
                    extra: Mapping[str, Any] | None = None) -> dict[str, str]:
    """Every ``null_reasons`` entry under a measured channel (and ``extra``, e.g. the predictions).

    Returns ``{key: reason}``; where several transitions give a reason for the same
    key, the first is kept and the count is added (``"... (7 transitions)"``).
    """
    found: dict[str, list[str]] = {}

    def walk(node: Any) -> None:
        if isinstance(node, Mapping):
            for k, v in node.items():
                if k == "null_reasons" and isinstance(v, Mapping):
                    for key, why in v.items():
                        found.setdefault(str(key), []).append(str(why))
                else:
                    walk(v)
        elif isinstance(node, list):
            for item in node:
                walk(item)

    walk(channel)
    if extra:
        walk(extra)
    out = {}
    for key, whys in found.items():
        out[key] = whys[0] if len(whys) == 1 else f"{whys[0]} ({len(whys)} places)"
    return out


# ----------------------------------------------------------------------------- number text
#: Display units of columns, from their names (SI base units; the exact value is in data-v).
UNIT_SUFFIXES = (("_s", "s"), ("_hz", "Hz"), ("_pct", "%"), ("_db", "dB"), ("_deg", "deg"))
_SI = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "\u00b5"),
       (1e-9, "n"), (1e-12, "p"))


def column_unit(column: str) -> str:
    """The unit a column's name carries (``settling_time_s_longest`` -> ``s``), or ``""``."""
    for base in _base_names(column)[::-1]:
        for suffix, unit in UNIT_SUFFIXES:
            if base.endswith(suffix):
                return unit
    return ""


def number_text(value: Any, unit: str = "", digits: int = 4) -> str:
    """A value for people: 4 significant digits, SI prefix for seconds and hertz."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value}{(' ' + unit) if unit else ''}"
    if isinstance(value, float):
        if math.isnan(value):
            return "NaN"
        if math.isinf(value):
            return ("+" if value > 0 else "\u2212") + "\u221e"
        if unit in ("s", "Hz") and value != 0:
            factor, prefix = next(((f, p) for f, p in _SI if abs(value) >= f * 0.9995),
                                  (1.0, ""))
            text, unit = f"{value / factor:.{digits}g}", prefix + unit
        else:
            text = f"{value:.{digits}g}"
        text = text.replace("-", "\u2212")
        return f"{text} {unit}" if unit else text
    return str(value)


def cell_text(cell: Cell, unit: str = "") -> str:
    """The cell's text: the number, ``≥``/``≤`` before a bound, ``n/a`` for a gap."""
    if cell.missing:
        return "n/a"
    text = number_text(cell.value, unit)
    if cell.bound == "lower":
        return "\u2265 " + text
    if cell.bound == "upper":
        return "\u2264 " + text
    if cell.bound == "both":
        return "~ " + text
    return text
