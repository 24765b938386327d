"""Units at the edge: read ``"2 mH"``-style strings into SI floats, once, with pint.

Everything inside dcsim is a plain float in SI units. The only place a unit string is read is
here, through :func:`to_si`. A plain number is taken to be SI already; a string is a number
followed by a unit (``"3000 rpm"``, ``"25 g*cm^2"``, ``"0.05 N*m/A"``, ``"5 %"``), converted to
the SI unit the caller asks for. A wrong dimension, an unreadable string or a value that is not
finite raises :class:`UnitError`, whose text says what was expected and what was found.

pint treats the radian as dimensionless, so ``"3000 rpm"`` converts to rad/s, and
``"V*s/rad"`` (a back-EMF constant) and ``"N*m/A"`` (a torque constant) are the same unit.

The one :class:`pint.UnitRegistry` is made on first use by :func:`registry` and kept in that
function's cache; the module holds no other state.
"""

from __future__ import annotations

import datetime
import math
import numbers
import re
import sys
from fractions import Fraction
from functools import lru_cache
from typing import Any

_HIDE_DASK = "dask" not in sys.modules
if _HIDE_DASK:
    # pint imports dask on start-up when it is installed (for dask arrays of quantities, which
    # dcsim never makes): 0.1 s and 9 MB in every process. Hidden while pint loads; a later
    # ``import dask`` (the sweep's cluster) works as usual.
    sys.modules["dask"] = None  # type: ignore[assignment]
try:
    import pint
finally:
    if _HIDE_DASK:
        del sys.modules["dask"]

__all__ = [
    "UnitError",
    "describe_dimension",
    "describe_value",
    "registry",
    "to_si",
]

_MAX_TEXT = 200
"""Longest quantity string read [characters]; longer ones are refused unread."""

_MAX_EXPONENT_PRODUCT = 100
"""Largest product of the exponents written in one unit (``m^2`` gives 2, ``(m^2)^3`` 6).

pint evaluates integer powers exactly, so ``"m^(10^10^10)"`` would never finish; exponents are
therefore limited to small plain numbers, never chained, with a bounded product.
"""

# A number at the start of a quantity string: decimal, optional exponent, or inf / nan.
_NUMBER = re.compile(
    r"""\s*(?P<number>[+-]?(?:
            (?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?
          | (?:inf(?:inity)?|nan)(?![A-Za-z])
        ))\s*(?P<unit>.*?)\s*\Z""",
    re.VERBOSE | re.IGNORECASE | re.DOTALL,
)
_EXPONENT = re.compile(
    r"(?:\*\*|\^)\s*(?:\(\s*(?P<p>[+-]?[0-9]{1,2}(?:\.[0-9]{1,3})?)\s*\)"
    r"|(?P<n>[+-]?[0-9]{1,2}(?:\.[0-9]{1,3})?))(?![0-9.])"
)
_NUMERATOR_ONE = re.compile(r"(?<![A-Za-z0-9_.])1(?=\s*/)")
_UNIT_CHARS = re.compile(r"[A-Za-z0-9_ */^().+\-%µμΩ°]*")
_SUPERSCRIPTS = str.maketrans("⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺", "0123456789-+")
_SUPERSCRIPT_RUN = re.compile("[⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺]+")

# Nouns for dimensions a user is likely to write, first match wins. pint treats the radian as
# dimensionless, so an angular speed has the dimension of a frequency, a torque constant that
# of a magnetic flux, and a torque that of an energy.
_NOUNS = (
    ("s", "a time"),
    ("Hz", "a frequency or an angular speed"),
    ("1/s^2", "an angular acceleration"),
    ("V", "a voltage"),
    ("A", "a current"),
    ("ohm", "a resistance"),
    ("S", "a conductance"),
    ("H", "an inductance"),
    ("F", "a capacitance"),
    ("C", "a charge"),
    ("W", "a power"),
    ("N*m", "a torque or an energy"),
    ("N", "a force"),
    ("kg", "a mass"),
    ("m", "a length"),
    ("m/s", "a linear speed"),
    ("kg*m^2", "a moment of inertia"),
    ("N*m/A", "a torque constant (V*s/rad, the same as a back-EMF constant)"),
    ("N*m*s/rad", "a viscous friction coefficient"),
    ("A^2*s", "an I²t value"),
    ("rad/(V*s)", "a speed constant"),
    ("V/A/s", "a resistance per second (an integral gain in V/(A*s))"),
    ("A*s/rad", "a current per speed (a proportional gain in A*s/rad)"),
    ("K", "a temperature"),
    ("Pa", "a pressure"),
    ("T", "a magnetic flux density"),
)


class UnitError(ValueError):
    """A value could not be read as the quantity asked for.

    Internal to the edge: the scenario loader turns it into a
    :class:`~dcsim.errors.ScenarioError` that also names the file and the key.

    Parameters
    ----------
    detail : str
        ``"expected an inductance (e.g. '2 mH'), found '2 ohm' (a resistance)"``.
    """

    def __init__(self, detail: str) -> None:
        self.detail = detail
        super().__init__(detail)


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    """The unit registry of dcsim, made on first use and then reused.

    Returns
    -------
    pint.UnitRegistry
        pint's default definitions (``rpm``, ``%``, SI prefixes, ...), case-sensitive.

    Notes
    -----
    Parsing pint's definitions takes about 0.4 s; pint keeps the parsed form in the user's
    cache folder (``cache_folder=":auto:"``), which cuts that to about 0.1 s on later runs.
    Where no cache folder can be written, the registry is built without one.
    """
    try:
        return pint.UnitRegistry(cache_folder=":auto:")
    except Exception:  # noqa: BLE001 - any cache trouble: fall back to parsing afresh
        return pint.UnitRegistry()


def to_si(value: Any, unit: str, *, noun: str, example: str) -> float:
    """Convert a scenario value to a float in the SI unit ``unit``.

    Parameters
    ----------
    value : int, float or str
        A plain number, taken to be in SI already, or a string ``"<number> <unit>"`` such as
        ``"2 mH"``, ``"3000 rpm"``, ``"25 g*cm^2"`` or ``"5 %"``. Booleans are refused.
    unit : str
        The SI unit wanted, as pint reads it (``"H"``, ``"rad/s"``, ``"N*m*s/rad"``, ``""`` for a
        pure number).
    noun : str
        What the value is, for messages (``"an inductance"``).
    example : str
        A correctly written value, for messages (``"2 mH"``).

    Returns
    -------
    float
        The value in ``unit`` [SI], finite.

    Raises
    ------
    UnitError
        Wrong type, unreadable string, wrong dimension or a value that is not finite.
    """
    expected = f"expected {noun} (e.g. '{example}')"
    if isinstance(value, bool) or not isinstance(value, numbers.Real | str):
        raise UnitError(f"{expected}, found {describe_value(value, with_kind=True)}")
    if isinstance(value, str):
        si = _string_to_si(value, unit, expected)
    else:
        try:
            si = float(value)
        except (OverflowError, TypeError, ValueError):
            raise UnitError(
                f"{expected}, found {describe_value(value)}, which is too large"
            ) from None
    if not math.isfinite(si):
        raise UnitError(
            f"expected {noun} with a finite value (e.g. '{example}'), found {describe_value(value)}"
        )
    return si


def describe_dimension(quantity: Any) -> str:
    """Name the kind of quantity a pint quantity or unit is, for messages.

    Parameters
    ----------
    quantity : pint.Quantity or pint.Unit
        Anything with a pint ``dimensionality``.

    Returns
    -------
    str
        A noun such as ``"a resistance"`` or ``"a time"``; for a dimension without a common
        name, its pint dimensionality (``"a quantity of dimension [length] ** 3"``).
    """
    dims = quantity.dimensionality
    if not dims:
        return "a plain number"
    ureg = registry()
    for unit, noun in _NOUNS:
        if ureg.parse_units(unit).dimensionality == dims:
            return noun
    return f"a quantity of dimension {dims}"


def describe_value(value: Any, *, with_kind: bool = False) -> str:
    """Show a value found in a scenario the way a message should quote it.

    Parameters
    ----------
    value : object
        What the TOML reader (or a caller of ``with_changes``) produced.
    with_kind : bool
        Append the TOML type in brackets for strings, numbers and booleans
        (``"'yes' (a string)"``).

    Returns
    -------
    str
        ``"'2 ohm'"``, ``"1.5"``, ``"true"``, ``"a table"``, ``"an array of 2 items"``, ...
    """
    if isinstance(value, bool):
        text, kind = ("true" if value else "false"), "a boolean"
    elif isinstance(value, str):
        short = value if len(value) <= 60 else value[:57] + "..."
        text, kind = repr(short), "a string"
    elif isinstance(value, numbers.Number):
        try:
            text = repr(value) if isinstance(value, float) else str(value)
        except ValueError:  # an integer beyond Python's digit limit for str()
            text = "a very large integer"
        if len(text) > 40:
            text = text[:37] + "..."
        kind = "a number"
    elif isinstance(value, dict):
        return "a table"
    elif isinstance(value, list | tuple):
        return f"an array of {len(value)} item{'' if len(value) == 1 else 's'}"
    elif isinstance(value, datetime.datetime):
        return f"a date-time ({value.isoformat()})"
    elif isinstance(value, datetime.date):
        return f"a date ({value.isoformat()})"
    elif isinstance(value, datetime.time):
        return f"a time of day ({value.isoformat()})"
    elif value is None:
        return "nothing (None)"
    else:
        return f"a value of type {type(value).__name__}"
    return f"{text} ({kind})" if with_kind else text


def _string_to_si(text: str, unit: str, expected: str) -> float:
    """Read ``"<number> <unit>"`` and convert it to ``unit`` [SI]."""
    found = describe_value(text)
    if len(text) > _MAX_TEXT:
        raise UnitError(f"{expected}, found a string of {len(text)} characters")
    match = _NUMBER.match(text)
    if match is None:
        raise UnitError(f"{expected}, found {found}, which is not a number followed by a unit")
    magnitude = float(match["number"])  # "1e999" gives inf, refused as not finite below
    unit_text = _normalise_unit(match["unit"])
    problem = _unit_text_problem(unit_text)
    if problem:
        raise UnitError(f"{expected}, found {found}, {problem}")

    ureg = registry()
    try:
        written = ureg.parse_units(unit_text)
    except pint.UndefinedUnitError as err:
        names = ", ".join(repr(n) for n in err.args) or repr(unit_text)
        raise UnitError(f"{expected}, found {found}, with the unknown unit {names}") from None
    except Exception:  # pint's parser raises many exception types on arbitrary text
        raise UnitError(
            f"{expected}, found {found}, whose unit {unit_text!r} cannot be read"
        ) from None

    target = ureg.parse_units(unit)
    if written.dimensionality != target.dimensionality:
        kind = describe_dimension(written)
        hint = ""
        if not unit_text:
            hint = "; a number without a unit is read as SI only when written without quotes"
        raise UnitError(f"{expected}, found {found} ({kind}){hint}")
    try:
        exact = _exact_decimal_conversion(match["number"], magnitude, written, target)
        if exact is not None:
            return exact
        return float(ureg.Quantity(magnitude, written).to(target).magnitude)
    except Exception:  # overflow of prefix**power, offset units (degC*m), ...
        raise UnitError(f"{expected}, found {found}, which cannot be converted to {unit}") from None


def _exact_decimal_conversion(
    number: str, magnitude: float, written: pint.Unit, target: pint.Unit
) -> float | None:
    """Convert with exact decimal arithmetic when the factor is an integer or its inverse.

    ``100 * 1e-6`` is ``9.999999999999999e-05`` in floating point, but ``"100 us"`` should be
    the double nearest to 1e-4, like the literal ``1e-4``: times such as recording intervals
    and event instants are compared and divided by the engine. For factors like 1e-6, 1000 or
    60 the written decimal is scaled as a fraction and rounded once. Returns ``None`` when the
    factor is not of that kind (rpm, an offset unit, ...) or the number is extreme.
    """
    if not (magnitude == 0 or 1e-300 < abs(magnitude) < 1e300):
        return None
    ureg = registry()
    if ureg.Quantity(0.0, written).to(target).magnitude != 0:
        return None  # an offset unit such as degC
    factor = float(ureg.Quantity(1.0, written).to(target).magnitude)
    if factor >= 1:
        if factor != round(factor):
            return None
        return float(Fraction(number) * round(factor))
    inverse = 1.0 / factor
    divisor = round(inverse)
    if divisor == 0 or abs(inverse - divisor) > 1e-12 * divisor:
        return None
    return float(Fraction(number) / divisor)


def _normalise_unit(unit_text: str) -> str:
    """Write superscript powers and middle dots the ASCII way; ``"/s"`` means ``"1/s"``."""
    unit_text = _SUPERSCRIPT_RUN.sub(lambda m: "^" + m[0].translate(_SUPERSCRIPTS), unit_text)
    unit_text = unit_text.replace("·", "*").replace("⋅", "*").strip()
    if unit_text.startswith("/"):
        unit_text = "1" + unit_text
    return unit_text


def _unit_text_problem(unit_text: str) -> str:
    """Why a unit expression is refused before pint sees it, or ``""`` if it is acceptable.

    Numbers may appear in a unit only as small exponents (``m^2``, ``s**-1``, ``m^(0.5)``) and
    as the ``1`` of ``1/s``; this keeps pint's exact integer arithmetic bounded.
    """
    if _UNIT_CHARS.fullmatch(unit_text) is None:
        bad = next(c for c in unit_text if _UNIT_CHARS.fullmatch(c) is None)
        return f"which has the character {bad!r} where a unit is expected"
    product = 1.0
    for match in _EXPONENT.finditer(unit_text):
        if re.match(r"\s*(?:\*\*|\^)", unit_text[match.end() :]):
            return "which has a chained power (write 'm^6', not 'm^2^3')"
        product *= max(1.0, abs(float(match["p"] or match["n"])))
    if product > _MAX_EXPONENT_PRODUCT:
        return "whose powers are too large for a physical unit"
    rest = _NUMERATOR_ONE.sub("", _EXPONENT.sub("", unit_text))
    if re.search(r"[0-9]", rest):
        return (
            "which is not a number followed by a unit (numbers inside a unit are allowed "
            "only as small powers, as in 'm^2')"
        )
    if "^" in rest or "**" in rest:
        return "whose powers are not plain numbers (write 'm^2' or 's^-1')"
    return ""
