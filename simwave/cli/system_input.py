"""One way to say which system H(s) to use: shared click options, TOML system files, tables.

Every command that needs a system decorates itself with :func:`system_options`
and calls :func:`resolve_system` on the :class:`SystemSpec` it receives. Batch
files embed the same table that a system file holds, read by
:func:`system_from_mapping`.

System file (TOML), exactly one form plus optional name, notes and dead time::

    name = "strain-gauge front end"
    notes = "two-pole anti-alias, 2 ms cable and converter latency"
    dead_time_s = "2m"                  # optional; seconds, number or text with suffix
    expression = "(2*pi*1k)^2/(s^2 + 1.414*2*pi*1k*s + (2*pi*1k)^2)"
    # or: ode = "y'' + 3y' + 2y = 2x' + x"
    # or: [ode]          a = [1, 3, 2]          b = [2, 1]
    # or: [coefficients] numerator = [1]       denominator = [1, "1.414", 1]
    # or: [zpk]          zeros = []  poles = ["-1+2j", "-1-2j"]  gain = 5
    # or: [design]       family = "butterworth"  kind = "lowpass"  order = 4
    #                    cutoff_hz = "1k"  (a pair for band kinds)  ripple_db  attenuation_db

Expression and ODE text may use parameter names, with their values (and optional
tolerances, see :mod:`simwave.model.params`) in a ``[parameters]`` table::

    expression = "1/(R*C*s + 1)"
    [parameters]
    R = "10k ±1%"
    C = "100n ±5%"

``--set R=12k`` (repeatable) gives or overrides a value on the command line; an
override without a tolerance keeps the file's tolerance for that parameter.
"""

from __future__ import annotations

import functools
import math
import os
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, fields
from typing import TYPE_CHECKING, Any

import click

from simwave.vocabulary import warn_renamed
from simwave.errors import InvalidSystemError, ParseError, SimwaveError
from simwave.tomlfile import read_toml
from simwave.model.params import parse_assignment

if TYPE_CHECKING:  # numpy and scipy load only when a system is built
    from simwave.model.system import System


def parse_number(text: Any, what: str) -> float:
    """:func:`simwave.model.parse.parse_number`, imported on first use (keeps ``--help`` light)."""
    from simwave.model.parse import parse_number as parse

    return parse(text, what)


#: The forms a system table may take (exactly one per table).
FORMS = ("expression", "ode", "coefficients", "zpk", "design")
#: Other keys a system table may have.
EXTRA_KEYS = ("name", "notes", "dead_time_s", "parameters")
#: Keys inside each sub-table form.
FORM_KEYS = {
    "ode": ("a", "b"),
    "coefficients": ("numerator", "denominator"),
    "zpk": ("zeros", "poles", "gain"),
    "design": ("family", "kind", "order", "cutoff_hz", "ripple_db", "attenuation_db"),
}
#: Keys of the --design option text.
DESIGN_KEYS = ("order", "cutoff_hz", "ripple_db", "attenuation_db")
#: Old spellings of the design-text keys, accepted for one release.
_OLD_DESIGN_KEYS = {"cutoff": "cutoff_hz", "ripple": "ripple_db", "attenuation": "attenuation_db"}


@dataclass(frozen=True)
class SystemSpec:
    """The raw values of the system options, as typed (all text or None)."""

    system: str | None = None
    numerator: str | None = None
    denominator: str | None = None
    ode_a: str | None = None
    ode_b: str | None = None
    zeros: str | None = None
    poles: str | None = None
    gain: str | None = None
    design: str | None = None
    dead_time: str | None = None
    settings: tuple[str, ...] = ()

    @property
    def is_empty(self) -> bool:
        """True when no system option was given at all."""
        return not self.settings and all(
            getattr(self, f.name) is None for f in fields(self) if f.name != "settings")

    @property
    def file(self) -> str | None:
        """The TOML system file named by -s/--system, if any (an input no output may replace)."""
        text = (self.system or "").strip()
        return text if text.lower().endswith(".toml") else None


_OPTIONS: list[tuple[tuple[str, ...], str, str]] = [
    (("-s", "--system"), "TEXT|FILE.toml",
     ("H(s) expression, e.g. '2*pi*1k/(s+2*pi*1k)', ODE text, e.g. \"y'' + 3y' + 2y = 2x' + x\", "
     "or a TOML system file (a path ending in .toml).")),
    (("--numerator",), "LIST", "H(s) numerator coefficients, descending powers of s, e.g. '1'."),
    (("--denominator",), "LIST", "H(s) denominator coefficients, e.g. '1, 1.414, 1'."),
    (("--ode-a",), "LIST", "ODE output-side coefficients a_n..a_0 (of y^(n)..y)."),
    (("--ode-b",), "LIST", "ODE input-side coefficients b_m..b_0 (of x^(m)..x)."),
    (("--zeros",), "LIST", "Zeros in rad/s, e.g. '0, -1k+2kj, -1k-2kj' (use with --poles)."),
    (("--poles",), "LIST", "Poles in rad/s, e.g. '-100, -1+2j, -1-2j' ('' for none)."),
    (("--gain",), "NUMBER", "Gain factor k in front of the zero and pole products (default 1)."),
    (("--design",), "TEXT",
     ("Analog prototype, e.g. 'butterworth lowpass order=4 cutoff_hz=1k' or "
     "'elliptic bandpass order=3 cutoff_hz=300,3k ripple_db=0.5 attenuation_db=60'.")),
    (("--dead-time",), "SECONDS", "Extra dead time (transport delay) in seconds, e.g. '2m'."),
    (("--set", "settings"), "NAME=VALUE",
     ("Value of a parameter named in the system text, e.g. --set R=12k or "
      "--set 'C=100n ±5%' (repeatable; overrides a system file's [parameters]).")),
]


def system_options(func: Callable[..., Any]) -> Callable[..., Any]:
    """Click decorator: add the system options and pass them on as ``system_spec``.

    The decorated command receives one keyword argument ``system_spec``
    (a :class:`SystemSpec`) instead of the individual option values; call
    :func:`resolve_system` on it.
    """
    names = [f.name for f in fields(SystemSpec)]

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        values = {n: kwargs.pop(n, None) for n in names}
        values["settings"] = tuple(values["settings"] or ())
        spec = SystemSpec(**values)
        return func(*args, system_spec=spec, **kwargs)

    for decls, metavar, help_text in reversed(_OPTIONS):
        multiple = decls[-1] == "settings"
        wrapper = click.option(*decls, metavar=metavar, default=None, help=help_text,
                               multiple=multiple)(wrapper)
    return wrapper


def parse_settings(settings: Sequence[str], what: str = "--set") -> dict[str, str]:
    """``("R=12k", "C=100n ±5%")`` -> ``{"R": "12k", "C": "100n ±5%"}``; a name set twice
    is an error."""
    out: dict[str, str] = {}
    for item in settings:
        name, value = parse_assignment(item, what)
        if name in out:
            raise InvalidSystemError(f"{what}: {name} is given twice")
        out[name] = value
    return out


# ----------------------------------------------------------------------------- lists and numbers
def _items(text: str) -> list[str]:
    parts = [p.strip() for p in text.split(",")]
    if parts == [""]:
        return []
    if any(p == "" for p in parts):
        raise ParseError(f"empty item in the list {text!r}")
    return parts


def parse_number_list(text: str, what: str) -> list[float]:
    """Comma-separated real numbers (engineering suffixes and constant expressions allowed)."""
    return [parse_number(item, f"{what}, item {i + 1}") for i, item in enumerate(_items(text))]


def parse_complex_list(text: str, what: str) -> list[complex]:
    """Comma-separated real or complex numbers such as ``-1+2j``; suffixes allowed."""
    from simwave.model.parse import parse_complex

    return [parse_complex(item, f"{what}, item {i + 1}") for i, item in enumerate(_items(text))]


def _strip_unit(text: str, unit: str) -> str:
    t = text.strip()
    return t[: -len(unit)] if t.lower().endswith(unit.lower()) else t


def parse_design_text(text: str) -> System:
    """A design from text like ``'butterworth lowpass order=4 cutoff_hz=1k'``.

    Words: the family, then optionally the kind (default lowpass); then
    ``order=N``, ``cutoff_hz=F`` (``cutoff_hz=LOW,HIGH`` for band kinds) and, where
    the family needs them, ``ripple_db=DB`` and ``attenuation_db=DB`` (the keys of a
    system file's ``[design]`` table; ``cutoff=``, ``ripple=``, ``attenuation=`` are the
    old spellings, accepted for one release). Values may carry
    engineering suffixes and a trailing unit (``1kHz``, ``0.5dB``).
    """
    from simwave.model.designs import design
    words: list[str] = []
    values: dict[str, str] = {}
    for part in text.split():
        if "=" in part:
            key, _, value = part.partition("=")
            key = key.strip().lower()
            if key in _OLD_DESIGN_KEYS:
                warn_renamed(f"design {key}=", f"{_OLD_DESIGN_KEYS[key]}=")
                key = _OLD_DESIGN_KEYS[key]
            if key not in DESIGN_KEYS:
                raise InvalidSystemError(
                    f"design: unknown setting {key!r} (known: {', '.join(DESIGN_KEYS)})"
                )
            if key in values:
                raise InvalidSystemError(f"design: {key} is given twice")
            values[key] = value
        else:
            if values:
                raise InvalidSystemError(
                    f"design: {part!r} after the settings; write the family and kind first"
                )
            words.append(part)
    if not words or len(words) > 2:
        raise InvalidSystemError(
            "design: write the family, optionally the kind, then order=N cutoff_hz=F, "
            f"e.g. 'butterworth lowpass order=4 cutoff_hz=1k' (got {text!r})"
        )
    for key in ("order", "cutoff_hz"):
        if key not in values:
            raise InvalidSystemError(f"design: {key}= is missing (in {text!r})")
    order = parse_number(values["order"], "design order")
    if order != math.floor(order):
        raise InvalidSystemError(f"design: order must be a whole number, got {values['order']}")
    cutoff = [parse_number(_strip_unit(c, "hz"), "design cutoff")
              for c in _items(values["cutoff_hz"])]
    return design(
        words[0],
        int(order),
        cutoff[0] if len(cutoff) == 1 else cutoff,
        words[1] if len(words) == 2 else "lowpass",
        ripple_db=(parse_number(_strip_unit(values["ripple_db"], "db"), "design ripple_db")
                   if "ripple_db" in values else None),
        attenuation_db=(parse_number(_strip_unit(values["attenuation_db"], "db"),
                                     "design attenuation_db")
                        if "attenuation_db" in values else None),
    )


# ----------------------------------------------------------------------------- options
def resolve_system(spec: SystemSpec, *, required: bool = True) -> System | None:
    """The System the options describe (or None when none given and not ``required``).

    Raises
    ------
    SimwaveError
        No form or more than one form given, or a form that does not read.
    """
    from simwave.model.system import System

    forms = {
        "-s/--system": spec.system is not None,
        "--numerator/--denominator": spec.numerator is not None or spec.denominator is not None,
        "--ode-a/--ode-b": spec.ode_a is not None or spec.ode_b is not None,
        "--zeros/--poles/--gain": any(v is not None for v in (spec.zeros, spec.poles, spec.gain)),
        "--design": spec.design is not None,
    }
    given = [k for k, v in forms.items() if v]
    if not given:
        if not required and spec.dead_time is None:
            return None
        raise InvalidSystemError(
            "no system given: use one of " + ", ".join(forms) + " (see --help)"
        )
    if len(given) > 1:
        raise InvalidSystemError(f"give the system in one form only, not {' and '.join(given)}")
    form = given[0]
    settings = parse_settings(spec.settings)
    if settings and form != "-s/--system":
        raise InvalidSystemError(
            f"--set gives values to parameter names in H(s) or ODE text; {form} has none")
    if form == "-s/--system":
        text = spec.system or ""
        if spec.file is not None:
            system = load_system_file(spec.file, settings=settings)
        else:
            system = System.parse(text, parameters=settings)
    elif form == "--numerator/--denominator":
        if spec.numerator is None or spec.denominator is None:
            raise InvalidSystemError("--numerator and --denominator go together; give both")
        system = System.from_coeffs(
            parse_number_list(spec.numerator, "--numerator"),
            parse_number_list(spec.denominator, "--denominator"),
            text=f"numerator [{spec.numerator}] / denominator [{spec.denominator}]",
        )
    elif form == "--ode-a/--ode-b":
        if spec.ode_a is None or spec.ode_b is None:
            raise InvalidSystemError("--ode-a and --ode-b go together; give both")
        system = System.from_ode(
            parse_number_list(spec.ode_a, "--ode-a"),
            parse_number_list(spec.ode_b, "--ode-b"),
            text=f"ODE a [{spec.ode_a}], b [{spec.ode_b}]",
        )
    elif form == "--zeros/--poles/--gain":
        if spec.poles is None:
            raise InvalidSystemError("--zeros/--gain need --poles too ('' for no poles)")
        system = System.from_zpk(
            parse_complex_list(spec.zeros or "", "--zeros"),
            parse_complex_list(spec.poles, "--poles"),
            parse_number(spec.gain, "--gain") if spec.gain is not None else 1.0,
            text=f"zeros [{spec.zeros or ''}], poles [{spec.poles}], gain {spec.gain or '1'}",
        )
    else:
        system = parse_design_text(spec.design or "")
    if spec.dead_time is not None:
        system = system.with_delay(_seconds(parse_number(spec.dead_time, "--dead-time"),
                                            "--dead-time"))
    return system


def _seconds(value: float, what: str) -> float:
    if not math.isfinite(value) or value < 0:
        raise InvalidSystemError(f"{what} must be >= 0 seconds, got {value:g}")
    return value


# ----------------------------------------------------------------------------- files and tables
def load_system_file(path: str | os.PathLike[str],
                     settings: Mapping[str, Any] | None = None) -> System:
    """Read a TOML system file (see the module docstring for its keys).

    The system's name defaults to the file name without extension. ``settings``
    (``{name: value}``, from ``--set``) give or override parameter values.

    Raises
    ------
    SimwaveError
        Missing or unreadable file, invalid TOML, unknown keys, not exactly one form.
    """

    p = os.fspath(path)
    data, _ = read_toml(p, "system file", InvalidSystemError)
    system = system_from_mapping(data, where=p, settings=settings)
    if system.name is None:
        system.name = os.path.splitext(os.path.basename(p))[0]
    return system


def _located(where: str, key: str, exc: SimwaveError) -> SimwaveError:
    """The same error, its message prefixed with the file (or table) and the key."""
    return type(exc)(f"{where}, {key}: {exc}")


def _number(value: Any, what: str) -> float:
    if isinstance(value, bool):
        raise InvalidSystemError(f"{what} must be a number, got {value!r}")
    if isinstance(value, (int, float)):
        v = float(value)
        if not math.isfinite(v):
            raise InvalidSystemError(f"{what} is NaN or infinite")
        return v
    if isinstance(value, str):
        return parse_number(value, what)
    raise InvalidSystemError(f"{what} must be a number or text like '4.7k', got {value!r}")


def _complex(value: Any, what: str) -> complex:
    from simwave.model.parse import parse_complex

    if isinstance(value, str):
        return parse_complex(value, what)
    if isinstance(value, list) and len(value) == 2:
        return complex(_number(value[0], what), _number(value[1], what))
    return complex(_number(value, what))


def _list(value: Any, what: str, convert: Callable[[Any, str], Any]) -> list[Any]:
    if isinstance(value, str):
        value = [v.strip() for v in value.split(",")] if value.strip() else []
    if not isinstance(value, list):
        raise InvalidSystemError(f"{what} must be a list, got {value!r}")
    return [convert(v, f"{what}, item {i + 1}") for i, v in enumerate(value)]


def _table(table: Any, key: str) -> Mapping[str, Any]:
    if not isinstance(table, Mapping):
        raise InvalidSystemError(f"must be a table ([{key}]), got {table!r}")
    for k in table:
        if k not in FORM_KEYS[key]:
            raise InvalidSystemError(
                f"unknown key {k!r} in [{key}] (known: {', '.join(FORM_KEYS[key])})"
            )
    return table


def _required(table: Mapping[str, Any], key: str, form: str) -> Any:
    if key not in table:
        raise InvalidSystemError(f"[{form}] needs {key}")
    return table[key]


def system_from_mapping(data: Mapping[str, Any], where: str = "system table",
                        settings: Mapping[str, Any] | None = None) -> System:
    """A System from a table with one of the forms (the TOML system-file schema).

    Parameters
    ----------
    data : mapping
        Keys: ``name``, ``notes``, ``dead_time_s`` (optional) and exactly one of
        ``expression``, ``ode``, ``coefficients``, ``zpk``, ``design``.
    where : str
        Where the table came from, for error messages (a file name, a table name).
    settings : mapping, optional
        Parameter values that override (or add to) the table's ``parameters``;
        an override without a tolerance keeps the table's tolerance.

    Raises
    ------
    SimwaveError
        The message starts with ``where`` and names the key at fault.
    """

    if not isinstance(data, Mapping):
        raise InvalidSystemError(f"{where}: a system must be a table, got {data!r}")
    for key in data:
        if key not in FORMS + EXTRA_KEYS:
            raise InvalidSystemError(
                f"{where}: unknown key {key!r} (known: {', '.join(FORMS + EXTRA_KEYS)})"
            )
    present = [f for f in FORMS if f in data]
    if len(present) != 1:
        got = "none" if not present else " and ".join(present)
        raise InvalidSystemError(
            f"{where}: give exactly one of {', '.join(FORMS)} (got {got})"
        )
    form = present[0]
    name = data.get("name")
    if name is not None and not isinstance(name, str):
        raise InvalidSystemError(f"{where}: name must be text, got {name!r}")
    notes = data.get("notes")
    if notes is not None and not isinstance(notes, str):
        raise InvalidSystemError(f"{where}: notes must be text, got {notes!r}")
    try:
        table = merged_parameters(data.get("parameters"), settings)
    except SimwaveError as exc:
        raise _located(where, "parameters", exc) from None
    if table and not (form == "expression" or (form == "ode" and isinstance(data[form], str))):
        raise InvalidSystemError(f"{where}: parameters apply to expression or ODE text, "
                                 f"not to the {form} form")
    try:
        system = _build_form(data[form], form, table)
    except SimwaveError as exc:
        raise _located(where, form, exc) from None
    if "dead_time_s" in data:
        try:
            system = system.with_delay(
                _seconds(_number(data["dead_time_s"], "value"), "value")
            )
        except SimwaveError as exc:
            raise _located(where, "dead_time_s", exc) from None
    system.name = name
    return system


def merged_parameters(table: Any, settings: Mapping[str, Any] | None = None
                      ) -> dict[str, Any]:
    """A system table's ``parameters`` with ``settings`` applied (``{name: Parameter}``)."""
    from simwave.model.params import parameter_table

    params = parameter_table(table)
    for name, value in parameter_table(settings).items():
        old = params.get(name)
        if value.tolerance is None and old is not None and old.tolerance is not None:
            value = type(value)(name, value.nominal, old.tolerance, value.text)
        params[name] = value
    return params


def _build_form(value: Any, form: str, parameters: Mapping[str, Any] | None = None) -> System:
    from simwave.model.designs import design
    from simwave.model.system import System

    if form == "expression":
        if not isinstance(value, str):
            raise InvalidSystemError(f"must be text, got {value!r}")
        return System.parse(value, expect="expression", parameters=parameters)
    if form == "ode" and isinstance(value, str):
        return System.parse(value, expect="ode", parameters=parameters)
    if form == "ode":
        t = _table(value, form)
        a = _list(_required(t, "a", form), "a", _number)
        b = _list(_required(t, "b", form), "b", _number)
        return System.from_ode(a, b, text=f"ODE a {a}, b {b}")
    if form == "coefficients":
        t = _table(value, form)
        num = _list(_required(t, "numerator", form), "numerator", _number)
        den = _list(_required(t, "denominator", form), "denominator", _number)
        return System.from_coeffs(num, den, text=f"numerator {num} / denominator {den}")
    if form == "zpk":
        t = _table(value, form)
        zeros = _list(t.get("zeros", []), "zeros", _complex)
        poles = _list(_required(t, "poles", form), "poles", _complex)
        gain = _number(t.get("gain", 1.0), "gain")
        text = f"zeros {zeros}, poles {poles}, gain {gain:g}"
        return System.from_zpk(zeros, poles, gain, text=text)
    t = _table(value, form)
    family = _required(t, "family", form)
    order = _number(_required(t, "order", form), "order")
    if order != math.floor(order):
        raise InvalidSystemError(f"order must be a whole number, got {order:g}")
    raw = _required(t, "cutoff_hz", form)
    cutoff = (_list(raw, "cutoff_hz", _number) if isinstance(raw, list)
              else _number(raw, "cutoff_hz"))
    return design(
        str(family),
        int(order),
        cutoff,
        str(t.get("kind", "lowpass")),
        ripple_db=_number(t["ripple_db"], "ripple_db") if "ripple_db" in t else None,
        attenuation_db=_number(t["attenuation_db"], "attenuation_db")
        if "attenuation_db" in t else None,
    )
