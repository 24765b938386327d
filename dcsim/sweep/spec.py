"""Sweep files: read and check a TOML sweep into a frozen :class:`SweepSpec`.

A sweep file names a base scenario and what to vary around it::

    base = "../pump.toml"              # path relative to the sweep file, or a [base] table
    samples = 500                      # Monte Carlo draws per grid point (with [tolerance])
    seed = 7
    corners = true                     # every low/high combination of the toleranced keys
    metrics = ["i2t_A2s", "peak_current_A"]

    [set]                              # fixed changes to the base, for every run
    "simulation.duration" = "0.3 s"

    [grid]                             # every combination of the axes
    "supply.voltage" = ["10.5 V", "12 V", "14.4 V"]
    "motor.inductance" = { from = "0.2 mH", to = "0.4 mH", count = 3 }
    fuse = { "fuse.rated_current" = ["5 A", "10 A"], "fuse.melting_i2t" = ["18 A^2*s", "70 A^2*s"] }

    [tolerance]                        # drawn per sample, on top of each grid point
    "motor.resistance" = { normal = "5 %" }            # standard deviation
    "motor.torque_constant" = { uniform = "0.001 N*m/A" }   # +/- half width, in the key's unit

    [criteria]                         # pass/fail per run
    "peak_bus_voltage_V" = { max = "40 V" }

Every problem raises one :class:`~dcsim.errors.ScenarioError` naming the sweep file, the key
(``grid.motor.resistance``, ``tolerance.motor.resistance.normal``, ``metrics[1]``), what was
expected and what was found. Values are converted with the scenario's own key table
(:data:`~dcsim.scenario.schema.KEYS`) and :func:`~dcsim.units.to_si`, so a grid or tolerance
value is read exactly as the same value in a scenario file would be.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from dcsim.errors import ScenarioError
from dcsim.scenario.load import (
    convert_value,
    key_spec,
    load_scenario,
    load_scenario_mapping,
    parse_toml,
    read_toml_text,
    unknown_key_error,
)
from dcsim.scenario.schema import KeySpec, Scenario
from dcsim.units import UnitError, describe_value, to_si

__all__ = [
    "DEFAULT_METRICS",
    "Criterion",
    "GridAxis",
    "SweepSpec",
    "Tolerance",
    "load_sweep",
    "load_sweep_text",
    "metric_unit",
]

DEFAULT_METRICS: tuple[str, ...] = (
    "peak_current_A",
    "i2t_A2s",
    "peak_bus_voltage_V",
    "min_bus_voltage_V",
    "final_speed_rad_s",
)
"""Metrics collected when the sweep file names none (plus the fuse's heat fraction when the
base scenario has a fuse)."""

MAX_SAMPLES = 10_000_000
"""Largest ``samples`` accepted (the draws are held in memory: 8 bytes per key per sample)."""

_TOP_KEYS = (
    "base",
    "title",
    "samples",
    "seed",
    "corners",
    "corner_sigma",
    "nominal",
    "metrics",
    "traces",
    "set",
    "grid",
    "tolerance",
    "criteria",
)

# Units of summary keys, from the suffix their names carry (longest suffix first).
_METRIC_SUFFIX_UNITS = (
    ("_A2s", "A^2*s"),
    ("_rad_s", "rad/s"),
    ("_percent", "percent"),
    ("_fraction", ""),
    ("_Nm", "N*m"),
    ("_rad", "rad"),
    ("_V", "V"),
    ("_A", "A"),
    ("_W", "W"),
    ("_J", "J"),
    ("_s", "s"),
)


# --------------------------------------------------------------------------------------------
# The spec
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class GridAxis:
    """One axis of the grid: one key, or several keys that step together.

    Attributes
    ----------
    label : str
        The name written in the file (a dotted key, or the name of a linked group).
    keys : tuple of str
        Dotted scenario keys varied by this axis.
    levels : tuple of tuple
        ``levels[k][j]`` is the value of ``keys[j]`` at level ``k`` [SI; bool or str for
        switches and choices].
    """

    label: str
    keys: tuple[str, ...]
    levels: tuple[tuple[Any, ...], ...]


@dataclass(frozen=True)
class Tolerance:
    """A toleranced key.

    Attributes
    ----------
    key : str
        Dotted scenario key (a quantity).
    distribution : str
        ``"normal"`` (``amount`` is the standard deviation) or ``"uniform"`` (``amount`` is the
        half width: values from nominal - amount to nominal + amount).
    relative : bool
        ``amount`` is a fraction of the nominal value (written in %) rather than in the key's
        unit.
    amount : float
        Standard deviation or half width: a fraction [-] when ``relative``, else [SI unit of
        the key].
    """

    key: str
    distribution: str
    relative: bool
    amount: float


@dataclass(frozen=True)
class Criterion:
    """A pass/fail limit on one metric: the run passes when ``minimum <= value <= maximum``.

    Attributes
    ----------
    metric : str
        Summary key (``"peak_bus_voltage_V"``).
    minimum, maximum : float or None
        Limits in the metric's SI unit (``None``: no limit on that side).
    """

    metric: str
    minimum: float | None
    maximum: float | None

    def failure(self, value: float) -> str:
        """Text of the failed limit (``"peak_bus_voltage_V 41.2 > 40"``), or ``""``."""
        if math.isnan(value):
            return f"{self.metric} missing"
        if self.minimum is not None and value < self.minimum:
            return f"{self.metric} {value:.6g} < {self.minimum:.6g}"
        if self.maximum is not None and value > self.maximum:
            return f"{self.metric} {value:.6g} > {self.maximum:.6g}"
        return ""


@dataclass(frozen=True)
class SweepSpec:
    """A checked sweep file.

    Attributes
    ----------
    source : str
        The sweep file (used in messages).
    base : Scenario
        The base scenario with the ``[set]`` changes applied.
    grid : tuple of GridAxis
        Axes of the grid, in file order (the first varies slowest).
    tolerances : tuple of Tolerance
        Toleranced keys, in file order.
    samples : int
        Monte Carlo draws per grid point.
    seed : int
        Seed of the draws (:func:`numpy.random.default_rng`).
    corners : bool
        Whether every low/high combination of the toleranced keys is run at each grid point.
    corner_sigma : float
        Where a normal tolerance's corners sit, in standard deviations [-].
    nominal : bool
        Whether each grid point is also run at its nominal values.
    metrics : tuple of str
        Summary keys collected per run (criteria metrics included).
    criteria : tuple of Criterion
        Pass/fail limits.
    traces : tuple of int or str
        Run numbers whose traces are written, and ``"worst"`` for the worst run of each metric.
    title : str
        Title of the plots.
    fixed : tuple of (str, object)
        The ``[set]`` changes as written.
    """

    source: str
    base: Scenario
    grid: tuple[GridAxis, ...] = ()
    tolerances: tuple[Tolerance, ...] = ()
    samples: int = 0
    seed: int = 0
    corners: bool = False
    corner_sigma: float = 3.0
    nominal: bool = True
    metrics: tuple[str, ...] = DEFAULT_METRICS
    criteria: tuple[Criterion, ...] = ()
    traces: tuple[int | str, ...] = ()
    title: str = ""
    fixed: tuple[tuple[str, Any], ...] = ()

    @property
    def varied_keys(self) -> tuple[str, ...]:
        """Scenario keys that take a column: grid keys, then toleranced keys not in the grid."""
        keys = [k for axis in self.grid for k in axis.keys]
        keys += [t.key for t in self.tolerances if t.key not in keys]
        return tuple(keys)


# --------------------------------------------------------------------------------------------
# Loading
# --------------------------------------------------------------------------------------------


def load_sweep(path: str | os.PathLike[str]) -> SweepSpec:
    """Read and check a sweep file.

    Parameters
    ----------
    path : str or os.PathLike
        A TOML sweep file (UTF-8). A ``base`` path in it is relative to this file.

    Returns
    -------
    SweepSpec

    Raises
    ------
    ScenarioError
        The file or its base scenario cannot be read, or any value is not acceptable.
    """
    name = os.fspath(path)
    return load_sweep_text(read_toml_text(name, "sweep file"), source=name)


def load_sweep_text(
    text: str, source: str = "<sweep>", base_dir: str | os.PathLike[str] | None = None
) -> SweepSpec:
    """Read and check a sweep from TOML text.

    Parameters
    ----------
    text : str
        The TOML document.
    source : str
        Name used in messages; when it is a file path, ``base`` is relative to its folder.
    base_dir : str or os.PathLike, optional
        Folder a relative ``base`` path is taken from (default: the folder of ``source``, or
        the working directory when ``source`` is not a path).

    Returns
    -------
    SweepSpec

    Raises
    ------
    ScenarioError
        Anything not acceptable, naming the source, the key, the expectation and the finding.
    """
    source = str(source)
    doc = parse_toml(text, source)
    for name in doc:
        if name not in _TOP_KEYS:
            close = difflib.get_close_matches(name, _TOP_KEYS, n=1)
            hint = (
                f"did you mean '{close[0]}'?"
                if close
                else "expected one of " + ", ".join(_TOP_KEYS)
            )
            raise ScenarioError(f"unknown sweep key '{name}'; {hint}", source=source, key=name)
    if base_dir is None:
        base_dir = Path(source).parent if not source.startswith("<") else Path.cwd()
    base = _read_base(doc, source, Path(base_dir))
    fixed = _read_fixed(doc.get("set"), base, source)
    if fixed:
        base = _rewrap(lambda: base.with_changes(dict(fixed)), source, "set")
    mode = base.control.mode

    grid = _read_grid(doc.get("grid"), base, source, mode)
    tolerances = _read_tolerances(doc.get("tolerance"), base, grid, source, mode)
    samples = _read_int(doc, "samples", 0, source, upper=MAX_SAMPLES)
    seed = _read_int(doc, "seed", 0, source, upper=2**63 - 1)
    corners = _read_bool(doc, "corners", False, source)
    nominal = _read_bool(doc, "nominal", True, source)
    corner_sigma = _read_positive(doc, "corner_sigma", 3.0, source)
    if "samples" in doc and samples > 0 and not tolerances:
        raise ScenarioError(
            "expected a [tolerance] table to draw the samples from, found none",
            source=source,
            key="samples",
        )
    if tolerances and samples == 0 and not corners:
        raise ScenarioError(
            "expected samples = N (Monte Carlo draws) or corners = true to use the "
            "[tolerance] table, found neither",
            source=source,
            key="tolerance",
        )
    if not nominal and not tolerances:
        raise ScenarioError(
            "expected nominal = true when there is no [tolerance] (there would be no run), "
            "found nominal = false",
            source=source,
            key="nominal",
        )
    if "corner_sigma" in doc and not any(t.distribution == "normal" for t in tolerances):
        raise ScenarioError(
            "expected corner_sigma only with a normal tolerance, found no normal tolerance",
            source=source,
            key="corner_sigma",
        )

    default_metrics = DEFAULT_METRICS
    if base.fuse is not None:
        default_metrics += ("peak_fuse_heat_fraction",)
    metrics = _read_metrics(doc, source, default_metrics)
    criteria = _read_criteria(doc.get("criteria"), source)
    metrics += tuple(c.metric for c in criteria if c.metric not in metrics)
    traces = _read_traces(doc.get("traces"), source)
    title = doc.get("title", "")
    if not isinstance(title, str):
        raise ScenarioError(
            f"expected a title string, found {describe_value(title, with_kind=True)}",
            source=source,
            key="title",
        )
    return SweepSpec(
        source=source,
        base=base,
        grid=grid,
        tolerances=tolerances,
        samples=samples,
        seed=seed,
        corners=corners,
        corner_sigma=corner_sigma,
        nominal=nominal,
        metrics=metrics,
        criteria=criteria,
        traces=traces,
        title=title,
        fixed=fixed,
    )


def metric_unit(metric: str) -> str:
    """SI unit of a summary key, from the suffix of its name (``"i2t_A2s"`` -> ``"A^2*s"``).

    Parameters
    ----------
    metric : str
        Summary key.

    Returns
    -------
    str
        pint unit string; ``""`` (a plain number) when the name carries no known unit.
    """
    for suffix, unit in _METRIC_SUFFIX_UNITS:
        if metric.endswith(suffix):
            return unit
    return ""


# --------------------------------------------------------------------------------------------
# Parts
# --------------------------------------------------------------------------------------------


def _rewrap(make, source: str, where: str):
    """Run ``make()``; a ScenarioError from changing the base is re-named to the sweep file."""
    try:
        return make()
    except ScenarioError as err:
        key = f"{where}.{err.key}" if err.key else where
        raise ScenarioError(err.detail, source=source, key=key) from None


def _read_base(doc: dict[str, Any], source: str, base_dir: Path) -> Scenario:
    if "base" not in doc:
        raise ScenarioError(
            'missing key: expected a base scenario, e.g. base = "pump.toml" (relative to the '
            "sweep file) or a [base] table holding the scenario, found no base",
            source=source,
            key="base",
        )
    body = doc["base"]
    if isinstance(body, str):
        if not body.strip():
            raise ScenarioError(
                "expected a scenario file name, found an empty string", source=source, key="base"
            )
        path = Path(body)
        if not path.is_absolute():
            path = base_dir / path
        if not path.is_file():
            found = "a directory" if path.is_dir() else "no such file"
            raise ScenarioError(
                f"expected a scenario file at {describe_value(body)} (relative to the sweep "
                f"file), found {found} ({path})",
                source=source,
                key="base",
            )
        return load_scenario(path)
    if isinstance(body, dict):
        where = f"{source} [base]"
        return load_scenario_mapping(body, where)
    raise ScenarioError(
        "expected a scenario file name (a string) or a [base] table, found "
        f"{describe_value(body, with_kind=True)}",
        source=source,
        key="base",
    )


def _read_fixed(body: Any, base: Scenario, source: str) -> tuple[tuple[str, Any], ...]:
    if body is None:
        return ()
    if not isinstance(body, dict):
        raise ScenarioError(
            f'expected a table of dotted keys, e.g. [set] "simulation.duration" = "0.3 s", '
            f"found {describe_value(body, with_kind=True)}",
            source=source,
            key="set",
        )
    out = []
    for name, value in body.items():
        _scalar_spec(name, source, f"set.{name}")
        out.append((name, value))
    return tuple(out)


def _scalar_spec(name: str, source: str, key: str) -> KeySpec:
    """The KeySpec of a dotted scenario key that takes one value (a quantity, switch, choice)."""
    if not isinstance(name, str) or "." not in name:
        raise ScenarioError(
            f"expected a dotted scenario key such as 'motor.resistance', found "
            f"{describe_value(name)}",
            source=source,
            key=key,
        )
    spec = key_spec(name)
    if spec is None:
        raise unknown_key_error(name, source=source, key=key)
    if spec.kind not in ("quantity", "bool", "choice"):
        raise ScenarioError(
            f"expected a key that takes one number, switch or choice, found {name}, which "
            f"takes {spec.noun}",
            source=source,
            key=key,
        )
    return spec


def _refuse_derived(name: str, base: Scenario, source: str, key: str) -> None:
    """A wound-field machine's torque constant is derived from its field: it cannot vary."""
    if name == "motor.torque_constant" and base.motor.kind != "permanent_magnet":
        raise ScenarioError(
            f"expected a key the base scenario takes as written, found motor.torque_constant, "
            f"which a {base.motor.kind.replace('_', ' ')} machine (motor.kind) derives from its "
            "field; vary the field instead (motor.field_voltage, motor.field_resistance, "
            "motor.mutual_inductance, supply.voltage)",
            source=source,
            key=key,
        )


def _read_grid(body: Any, base: Scenario, source: str, mode: str) -> tuple[GridAxis, ...]:
    if body is None:
        return ()
    if not isinstance(body, dict):
        raise ScenarioError(
            "expected a [grid] table of keys and their values, found "
            f"{describe_value(body, with_kind=True)}",
            source=source,
            key="grid",
        )
    axes: list[GridAxis] = []
    seen: set[str] = set()
    for label, value in body.items():
        where = f"grid.{label}"
        linked = isinstance(value, dict) and value and all("." in str(k) for k in value)
        if linked:
            members = list(value.items())
        else:
            members = [(label, value)]
        columns = []
        for name, item in members:
            key = f"grid.{label}.{name}" if linked else where
            spec = _scalar_spec(name, source, key)
            _refuse_derived(name, base, source, key)
            if name in seen:
                raise ScenarioError(
                    f"expected each key once in [grid], found {name} again",
                    source=source,
                    key=key,
                )
            seen.add(name)
            columns.append(_grid_values(name, spec, item, base, source, key, mode))
        lengths = {len(c) for c in columns}
        if len(lengths) > 1:
            raise ScenarioError(
                "expected lists of the same length for keys that step together, found "
                + ", ".join(f"{n}: {len(c)}" for (n, _), c in zip(members, columns, strict=True)),
                source=source,
                key=where,
            )
        levels = tuple(zip(*columns, strict=True))
        axes.append(GridAxis(label=label, keys=tuple(n for n, _ in members), levels=levels))
    return tuple(axes)


def _grid_values(
    name: str, spec: KeySpec, item: Any, base: Scenario, source: str, key: str, mode: str
) -> list[Any]:
    """The SI values of one grid key (a list, or a range table ``{from, to, count}``)."""
    if isinstance(item, dict):
        values = _grid_range(name, spec, item, source, key, mode)
    elif isinstance(item, list):
        if not item:
            raise ScenarioError(
                f'expected a list of at least one value, e.g. ["{spec.example}"], found an '
                "empty list",
                source=source,
                key=key,
            )
        values = [
            convert_value(name, spec, v, key=f"{key}[{i}]", source=source, mode=mode)
            for i, v in enumerate(item)
        ]
    else:
        raise ScenarioError(
            f'expected a list of values, e.g. ["{spec.example}", ...], or a range '
            f"{{ from = ..., to = ..., count = N }}, found {describe_value(item, with_kind=True)}",
            source=source,
            key=key,
        )
    for i, v in enumerate(values):  # each value on its own must make a valid scenario
        _rewrap(lambda v=v: base.with_changes({name: v}), source, f"{key}[{i}]")
    return values


def _grid_range(
    name: str, spec: KeySpec, item: dict, source: str, key: str, mode: str
) -> list[float]:
    """``{ from = a, to = b, count = n [, scale = "linear" | "log"] }`` -> n values."""
    if spec.kind != "quantity":
        raise ScenarioError(
            f"expected a list of values for {name} (a range needs a quantity), found a table",
            source=source,
            key=key,
        )
    allowed = ("from", "to", "count", "scale")
    for k in item:
        if k not in allowed:
            close = difflib.get_close_matches(str(k), allowed, n=1)
            hint = f"; did you mean '{close[0]}'?" if close else ""
            raise ScenarioError(
                f"unknown range key '{k}'; expected from, to, count and optionally scale{hint}",
                source=source,
                key=f"{key}.{k}",
            )
    for k in ("from", "to", "count"):
        if k not in item:
            raise ScenarioError(
                f"missing key: expected a range {{ from = ..., to = ..., count = N }}, found no "
                f"{k}",
                source=source,
                key=key,
            )
    lo = convert_value(name, spec, item["from"], key=f"{key}.from", source=source, mode=mode)
    hi = convert_value(name, spec, item["to"], key=f"{key}.to", source=source, mode=mode)
    count = item["count"]
    if isinstance(count, bool) or not isinstance(count, int) or not 2 <= count <= 100_000:
        raise ScenarioError(
            f"expected a whole number of values from 2 to 100000, found {describe_value(count)}",
            source=source,
            key=f"{key}.count",
        )
    scale = item.get("scale", "linear")
    if scale not in ("linear", "log"):
        raise ScenarioError(
            f"expected scale 'linear' or 'log', found {describe_value(scale)}",
            source=source,
            key=f"{key}.scale",
        )
    if scale == "log":
        if not (lo > 0 and hi > 0):
            raise ScenarioError(
                f"expected from and to above 0 for a log scale, found {lo:g} and {hi:g} "
                f"{spec.unit}",
                source=source,
                key=key,
            )
        ratio = hi / lo
        return [lo * ratio ** (k / (count - 1)) for k in range(count - 1)] + [hi]
    step = (hi - lo) / (count - 1)
    return [lo + k * step for k in range(count - 1)] + [hi]


def _read_tolerances(
    body: Any, base: Scenario, grid: tuple[GridAxis, ...], source: str, mode: str
) -> tuple[Tolerance, ...]:
    if body is None:
        return ()
    if not isinstance(body, dict):
        raise ScenarioError(
            'expected a [tolerance] table, e.g. "motor.resistance" = { normal = "5 %" }, '
            f"found {describe_value(body, with_kind=True)}",
            source=source,
            key="tolerance",
        )
    in_grid = {k: axis for axis in grid for k in axis.keys}
    out = []
    for name, item in body.items():
        key = f"tolerance.{name}"
        spec = _scalar_spec(name, source, key)
        _refuse_derived(name, base, source, key)
        if spec.kind != "quantity":
            raise ScenarioError(
                f"expected a quantity key to put a tolerance on, found {name}, which takes "
                f"{spec.noun}",
                source=source,
                key=key,
            )
        if (
            not isinstance(item, dict)
            or len(item) != 1
            or next(iter(item))
            not in (
                "normal",
                "uniform",
            )
        ):
            found = describe_value(item, with_kind=True)
            if isinstance(item, dict):
                found = "a table with " + (", ".join(map(str, item)) or "no key")
            raise ScenarioError(
                'expected one of { normal = "5 %" } (standard deviation) or '
                f'{{ uniform = "5 %" }} (half width), in % or in {spec.unit}, found {found}',
                source=source,
                key=key,
            )
        distribution, amount = next(iter(item.items()))
        where = f"{key}.{distribution}"
        what = "a standard deviation" if distribution == "normal" else "a half width"
        relative, value = _tolerance_amount(name, spec, amount, what, source, where, mode)
        if relative:
            if name in in_grid:
                axis = in_grid[name]
                nominals = [level[axis.keys.index(name)] for level in axis.levels]
            else:
                nominals = [base.get(name)]
            if any(v is None for v in nominals):
                raise ScenarioError(
                    f"expected a value of {name} in the base scenario to take {what} in % of, "
                    f"found none (its table is absent); give the tolerance in {spec.unit}",
                    source=source,
                    key=where,
                )
            if any(v == 0 for v in nominals):
                raise ScenarioError(
                    f"expected a nominal {name} other than 0 for {what} in %, found 0; give "
                    f"the tolerance in {spec.unit}",
                    source=source,
                    key=where,
                )
        elif name not in in_grid and base.get(name) is None:
            raise ScenarioError(
                f"expected a value of {name} in the base scenario to put the tolerance around, "
                "found none (its table is absent)",
                source=source,
                key=where,
            )
        out.append(Tolerance(name, distribution, relative, value))
    return tuple(out)


def _tolerance_amount(
    name: str, spec: KeySpec, amount: Any, what: str, source: str, key: str, mode: str
) -> tuple[bool, float]:
    """``(relative, value)``: ``"5 %"`` -> ``(True, 0.05)``; ``"0.06 ohm"`` -> ``(False, 0.06)``."""
    relative = isinstance(amount, str) and amount.strip().endswith("%")
    if relative:
        try:
            value = to_si(amount, "", noun=f"{what} in %", example="5 %")
        except UnitError as err:
            raise ScenarioError(err.detail, source=source, key=key) from None
    else:
        # The key's own conversion (dimension, finiteness), then our own sign check.
        loose = dataclasses.replace(spec, constraint="any", noun=f"{what} in % or as {spec.noun}")
        value = convert_value(name, loose, amount, key=key, source=source, mode=mode)
    if not value > 0:
        raise ScenarioError(
            f"expected {what} above 0 (e.g. '5 %' or '{spec.example}'), found "
            f"{describe_value(amount)}",
            source=source,
            key=key,
        )
    return relative, float(value)


def _read_int(doc: dict, name: str, default: int, source: str, *, upper: int) -> int:
    value = doc.get(name, default)
    if isinstance(value, bool) or not isinstance(value, int) or not 0 <= value <= upper:
        raise ScenarioError(
            f"expected a whole number from 0 to {upper}, found "
            f"{describe_value(value, with_kind=True)}",
            source=source,
            key=name,
        )
    return value


def _read_bool(doc: dict, name: str, default: bool, source: str) -> bool:
    value = doc.get(name, default)
    if not isinstance(value, bool):
        raise ScenarioError(
            f"expected true or false, found {describe_value(value, with_kind=True)}",
            source=source,
            key=name,
        )
    return value


def _read_positive(doc: dict, name: str, default: float, source: str) -> float:
    value = doc.get(name, default)
    if (
        isinstance(value, bool)
        or not isinstance(value, int | float)
        or not (math.isfinite(value) and value > 0)
    ):
        raise ScenarioError(
            f"expected a number above 0, found {describe_value(value, with_kind=True)}",
            source=source,
            key=name,
        )
    return float(value)


def _read_metrics(doc: dict, source: str, default: tuple[str, ...]) -> tuple[str, ...]:
    if "metrics" not in doc:
        return default
    body = doc["metrics"]
    if not isinstance(body, list) or not body:
        raise ScenarioError(
            'expected a list of summary keys, e.g. metrics = ["i2t_A2s", "peak_current_A"], '
            f"found {describe_value(body, with_kind=True)}",
            source=source,
            key="metrics",
        )
    out: list[str] = []
    for i, name in enumerate(body):
        if not isinstance(name, str) or not name.strip():
            raise ScenarioError(
                f"expected a summary key such as 'i2t_A2s', found "
                f"{describe_value(name, with_kind=True)}",
                source=source,
                key=f"metrics[{i}]",
            )
        if name in out:
            raise ScenarioError(
                f"expected each metric once, found {name!r} again",
                source=source,
                key=f"metrics[{i}]",
            )
        out.append(name)
    return tuple(out)


def _read_criteria(body: Any, source: str) -> tuple[Criterion, ...]:
    if body is None:
        return ()
    if not isinstance(body, dict):
        raise ScenarioError(
            'expected a [criteria] table, e.g. "peak_bus_voltage_V" = { max = "40 V" }, '
            f"found {describe_value(body, with_kind=True)}",
            source=source,
            key="criteria",
        )
    out = []
    for metric, limits in body.items():
        key = f"criteria.{metric}"
        if not isinstance(limits, dict) or not limits:
            raise ScenarioError(
                f"expected {{ min = ... }}, {{ max = ... }} or both, found "
                f"{describe_value(limits, with_kind=True)}",
                source=source,
                key=key,
            )
        unit = metric_unit(metric)
        bounds: dict[str, float] = {}
        for side, value in limits.items():
            if side not in ("min", "max"):
                close = difflib.get_close_matches(str(side), ("min", "max"), n=1)
                hint = f"; did you mean '{close[0]}'?" if close else ""
                raise ScenarioError(
                    f"unknown limit '{side}'; expected min or max{hint}",
                    source=source,
                    key=f"{key}.{side}",
                )
            if isinstance(value, bool):  # a switch in the summary (fuse_melted): 0 or 1
                bounds[side] = float(value)
                continue
            example = f"40 {unit}" if unit else "0.5"
            try:
                bounds[side] = to_si(
                    value, unit, noun=f"a limit in {unit or 'plain numbers'}", example=example
                )
            except UnitError as err:
                raise ScenarioError(err.detail, source=source, key=f"{key}.{side}") from None
        lo, hi = bounds.get("min"), bounds.get("max")
        if lo is not None and hi is not None and lo > hi:
            raise ScenarioError(
                f"expected min at most max, found min {lo:g} above max {hi:g}",
                source=source,
                key=key,
            )
        out.append(Criterion(metric, lo, hi))
    return tuple(out)


def _read_traces(body: Any, source: str) -> tuple[int | str, ...]:
    if body is None:
        return ()
    if not isinstance(body, list):
        raise ScenarioError(
            'expected a list of run numbers and/or "worst", e.g. traces = ["worst", 12], '
            f"found {describe_value(body, with_kind=True)}",
            source=source,
            key="traces",
        )
    out: list[int | str] = []
    for i, item in enumerate(body):
        ok = item == "worst" or (isinstance(item, int) and not isinstance(item, bool) and item >= 0)
        if not ok:
            raise ScenarioError(
                'expected a run number (0 or more) or "worst", found '
                f"{describe_value(item, with_kind=True)}",
                source=source,
                key=f"traces[{i}]",
            )
        if item not in out:
            out.append(item)
    return tuple(out)
