"""SPICE numbers at the edges: parsing scale suffixes, writing decks, showing values.

Inside amploop every quantity is a plain SI float (farads, ohms, hertz, volts).
Suffixes appear only where text comes in (job file, netlist, ``--set``) or goes out
(generated decks, tables, plots).
"""

from __future__ import annotations

import math
import re

from amploop.spice.labels import ROLE_LABELS

__all__ = ["NUMBER", "NUMBER_PATTERN", "SCALE_SUFFIXES", "describe_values", "engineering",
           "parse_value", "scale_of", "spice_number", "split_number"]

#: SPICE scale suffixes (case-insensitive, as in SPICE). ``meg`` must be tried before ``m``.
SCALE_SUFFIXES: dict[str, float] = {
    "t": 1e12,
    "g": 1e9,
    "meg": 1e6,
    "k": 1e3,
    "mil": 25.4e-6,
    "m": 1e-3,
    "u": 1e-6,
    "n": 1e-9,
    "p": 1e-12,
    "f": 1e-15,
}

# Unit names SPICE users write after the suffix ("2pF", "10kOhm"); SPICE ignores them.
_UNIT_TAILS = ("", "f", "h", "v", "a", "s", "hz", "ohm", "ohms")

#: The one rule for a SPICE number's text, unsigned: a mantissa (``2``, ``1.5``, ``.5``)
#: with an optional exponent (``e-12``), group ``mantissa``; then every letter after it,
#: group ``letters`` (a scale suffix and/or a unit name: ``p``, ``Meg``, ``kOhm``, ``pF``).
#: Every reader of SPICE numbers in amploop (job file, ``--set``, netlist expressions, the
#: milli check of resistors) is built from it.
NUMBER_PATTERN = r"(?P<mantissa>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)(?P<letters>[a-zA-Z]*)"

#: :data:`NUMBER_PATTERN` compiled, for a whole text: an optional sign and spaces around.
NUMBER = re.compile(rf"^\s*(?P<sign>[+-]?){NUMBER_PATTERN}\s*$")

_SUFFIX_HELP = "SPICE suffixes: f p n u m k meg g t"


def split_number(text: str) -> tuple[str, str] | None:
    """The signed mantissa and the letters after it of the SPICE number ``text``
    (``"-1.5e3kOhm"`` -> ``("-1.5e3", "kOhm")``); None when ``text`` is no such number.

    Parameters
    ----------
    text
        The number as written, spaces around allowed.
    """
    match = NUMBER.match(text)
    if match is None:
        return None
    return match.group("sign") + match.group("mantissa"), match.group("letters")


def scale_of(letters: str) -> tuple[float, str]:
    """The scale factor of the letters after a SPICE number and what follows the suffix
    (``"kOhm"`` -> ``(1e3, "ohm")``, ``"Meg"`` -> ``(1e6, "")``, ``"V"`` -> ``(1.0, "v")``).

    The longest suffix that starts the letters wins (``meg`` and ``mil`` before ``m``),
    case-insensitive, as SPICE reads them.

    Parameters
    ----------
    letters
        The letters after the mantissa (group ``letters`` of :data:`NUMBER`).
    """
    tail = letters.lower()
    for suffix, factor in SCALE_SUFFIXES.items():
        if tail.startswith(suffix):
            return factor, tail[len(suffix):]
    return 1.0, tail


def parse_value(text: str | float) -> float:
    """Read a SPICE number such as ``"1.5p"``, ``"10k"``, ``"2meg"``, ``"3e-12"`` or ``4``.

    Parameters
    ----------
    text
        A number, or a string with an optional scale suffix (f p n u m k meg g t mil,
        case-insensitive as in SPICE) and an optional unit name after it (``2pF``).

    Returns
    -------
    float
        The value in SI units.

    Raises
    ------
    ValueError
        When the text is not a SPICE number; the caller adds file and place.
    """
    if isinstance(text, bool):  # a TOML true/false: a value error for the job's messages
        raise ValueError(f"expected a number, got {text!r}")  # noqa: TRY004
    if isinstance(text, (int, float)):
        value = float(text)
    else:
        parts = split_number(str(text))
        if parts is None:
            raise ValueError(f"{text!r} is not a number ({_SUFFIX_HELP})")
        mantissa, letters = parts
        scale, tail = scale_of(letters)
        if tail not in _UNIT_TAILS:  # a typo rather than a unit: refused, not ignored as SPICE does
            raise ValueError(f"{text!r}: unknown suffix {letters!r} ({_SUFFIX_HELP})")
        value = float(mantissa) * scale
    if not math.isfinite(value):
        raise ValueError(f"{text!r} is not a finite number")
    return value


def spice_number(value: float) -> str:
    """Write a float for a deck without losing precision.

    Python's shortest round-trip form (``1e-12``, ``1.5e-12``): as exact as ``%.17g`` and
    easier to read; ``%g`` would lose about 5e-6 relative.

    Parameters
    ----------
    value
        The value in SI units.
    """
    return repr(float(value))


_PREFIXES = [(1e12, "T"), (1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"),
             (1e-6, "µ"), (1e-9, "n"), (1e-12, "p"), (1e-15, "f"), (1e-18, "a")]


def engineering(value: float | None, unit: str = "", digits: int = 3) -> str:
    """Show a value with an SI prefix for people: ``engineering(1.23e7, "Hz") == "12.3 MHz"``.

    ``None`` and NaN show as ``"–"``; infinities as ``"inf"``.

    Parameters
    ----------
    value
        The value in SI units.
    unit
        The unit's symbol after the prefix (``"Hz"``, ``"F"``, ``"Ω"``); empty for none.
    digits
        Significant digits shown.
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "–"
    if math.isinf(value):
        return ("-inf" if value < 0 else "inf") + (f" {unit}" if unit else "")
    if value == 0:
        return f"0 {unit}".strip()
    magnitude = float(f"{abs(value):.{digits}g}")  # round first: 999.97 shows as 1 k
    scale, prefix = _PREFIXES[-1]
    for scale, prefix in _PREFIXES:
        if magnitude >= scale:
            break
    mantissa = math.copysign(magnitude, value) / scale
    text = f"{mantissa:.{digits}g}"
    if "e" in text:  # beyond the prefix table
        text = f"{mantissa * scale:.{digits}g}"
        prefix = ""
    return f"{text} {prefix}{unit}".strip()


def describe_values(values: dict[str, float], device: tuple[str, str] | None = None) -> str:
    """Compensation values for people: ``"Cc = 292.8 fF, Rc = 20 kΩ"`` (4 digits).

    The one form of them on the terminal, in the report and in results.json's messages.
    ``device`` = (name, size key) when a MOSFET stands in for Rc: ``"Mz w = 2.1 µm"``.

    Parameters
    ----------
    values
        Compensation values by role, SI: ``cc`` in farads, ``rc`` in ohms or the device
        size (metres, or a count for ``m``); other roles are left out.
    device
        (device name, size key ``"w"``, ``"l"`` or ``"m"``) when a MOSFET stands in for
        Rc; None for a resistor.
    """
    parts = []
    if "cc" in values:
        parts.append(f"{ROLE_LABELS['cc']} = {engineering(values['cc'], 'F', 4)}")
    if "rc" in values and device is not None:
        name, size = device
        parts.append(f"{name} {size} = {engineering(values['rc'], '' if size == 'm' else 'm', 4)}")
    elif "rc" in values:
        parts.append(f"{ROLE_LABELS['rc']} = {engineering(values['rc'], 'Ω', 4)}")
    return ", ".join(parts)
