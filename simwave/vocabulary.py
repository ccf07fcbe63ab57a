"""One name per concept: the rule, the old spellings still accepted, and their warning.

The rule (checked by tests/test_vocabulary.py over every command's options, the
system-file and batch-file keys and the JSON the commands write):

* A key — in a system or batch file, in JSON output, in a design text
  (``cutoff_hz=1k``) and as a Python keyword — is the concept's name in
  snake_case with its unit as a suffix: ``rate_hz``, ``duration_s``,
  ``settling_band_pct``, ``ripple_db``, ``match_hz``.
* A command-line option is the same name in kebab-case; it may leave the unit
  suffix to its metavar (``--settling-band PCT`` for ``settling_band_pct``,
  ``--rate HZ`` for ``rate_hz``), since its value takes SI suffixes.
* One spelling means one concept: an option spelled the same on two commands
  takes the same kind of value.

Old spellings keep working for one release and say so (:data:`RENAMED`).
"""

from __future__ import annotations

import warnings


class SimwaveDeprecationWarning(FutureWarning):
    """An old spelling of an option or key: still accepted in this release, gone in the next.

    A FutureWarning subclass, so that Python shows it by default (users, not only
    developers, need to see it).
    """


#: Old spelling -> (new spelling, where it applies). Accepted until the next release.
RENAMED: dict[str, tuple[str, str]] = {
    "measure --band": ("--settling-band", "simwave measure"),
    "measure -o/--output": ("--metrics", "simwave measure (writes the metrics JSON, as on run)"),
    "inspect --band": ("--band-hz", "simwave inspect (the frequency band the accuracy is "
                                    "checked over)"),
    "--match-frequency": ("--match-hz", "run, inspect, batch"),
    "output_ics": ("initial_output", "simulate(), batch system entries"),
    "cutoff=": ("cutoff_hz=", "design text"),
    "ripple=": ("ripple_db=", "design text"),
    "attenuation=": ("attenuation_db=", "design text"),
    "gen --full-scale": ("--output-full-scale", "simwave gen (the input-side --full-scale of "
                                                "run, measure, info and batch scales what is "
                                                "read)"),
    "batch rate": ("rate_hz", "[[inputs]] tables of a batch description"),
    "info JSON rate, duration, t0": ("rate_hz, duration_s, t0_s", "simwave info --json, "
                                                                  "WaveformInfo.to_dict()"),
}

#: Stems whose quantity has a unit, and that unit's key suffix.
QUANTITY_UNITS: dict[str, str] = {
    "rate": "hz", "duration": "s", "t0": "s", "cutoff": "hz", "ripple": "db",
    "attenuation": "db", "prewarp": "hz", "match": "hz", "settling_band": "pct",
    "dead_time": "s", "elapsed": "s", "peak_time": "s", "rise_time": "s", "fall_time": "s",
    "settling_time": "s", "delay": "s",
}

#: Unit suffixes a key may carry.
UNIT_SUFFIXES = ("_hz", "_s", "_pct", "_db", "_deg", "_dbfs", "_rad_s")

#: Groups of spellings of one concept: at most one member of each may be live.
SYNONYMS: tuple[frozenset[str], ...] = (
    frozenset({"band", "settling_band"}),
    frozenset({"output_ics", "initial_output"}),
    frozenset({"match_frequency", "match"}),
)


def stem(name: str) -> str:
    """``--settling-band`` -> ``settling_band``; ``settling_band_pct`` -> ``settling_band``."""
    s = name.lstrip("-").replace("-", "_").lower()
    for suffix in sorted(UNIT_SUFFIXES, key=len, reverse=True):
        if s.endswith(suffix) and len(s) > len(suffix):
            return s[: -len(suffix)]
    return s


def warn_renamed(old: str, new: str, stacklevel: int = 3) -> None:
    """Warn that ``old`` is the previous spelling of ``new`` (still accepted this release)."""
    warnings.warn(f"{old} is the old spelling of {new}; it still works in this release and "
                  f"will be removed in the next: write {new}", SimwaveDeprecationWarning,
                  stacklevel=stacklevel)
