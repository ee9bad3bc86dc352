"""Reading the recipe's `judge:` section (with its bins) and the station's `accuracy:` section.

Every problem is reported as `file:line: field problem`, like the rest of the recipe.
"""

from __future__ import annotations

from typing import Any

from sequencer.judge.bins import BinGap, pass_gaps
from sequencer.model.accuracy import DEFAULT_ACCURACY, Accuracy, AccuracyTable, RangeAccuracy
from sequencer.model.judgesettings import (
    CLASSIFICATIONS,
    DECISIONS,
    DEFAULT_BINS,
    FIGURE_INFO,
    FIGURE_KIND,
    FIGURE_UNIT,
    FIGURES,
    KNEE_BASES,
    VERDICTS,
    BinRule,
    FigureLimit,
    FigureRange,
    JudgeSettings,
    Shape,
)
from sequencer.model.units import format_si
from sequencer.recipe.fields import Fields, positive
from sequencer.recipe.units import UnitProblem, plain_number
from sequencer.recipe.yamlsource import Source


def parse_judge(source: Source, value: Any, accuracy: Accuracy = DEFAULT_ACCURACY) -> JudgeSettings:
    f = Fields.at(source, "judge", value)
    vt = positive(f, "test_voltage", "voltage", "25 V")
    vk = positive(f, "knee_voltage", "voltage", "6 V")
    fraction = float(f.number("knee_fraction", 0.8))
    f.check(0 < fraction < 1, "knee_fraction", f"must lie between 0 and 1 (got {fraction})")
    knee_of = f.choice("knee_of", KNEE_BASES, "measured")
    knee_current = f.optional_quantity("knee_current", "current")
    if knee_current is not None:
        f.check(knee_current > 0, "knee_current", f"must be positive (got {knee_current} A)")
        both = "knee_fraction" in f.data or "knee_of" in f.data
        f.check(not both, "knee_current", "replaces knee_fraction and knee_of; give one or other")
    window = positive(f, "slope_window", "voltage", "2 V")
    knee_window = f.optional_quantity("knee_window", "voltage")
    f.check(knee_window is None or knee_window > 0, "knee_window", "must be positive")
    reverse = f.optional_quantity("reverse_voltage", "voltage")
    f.check(reverse is None or reverse < 0, "reverse_voltage", f"must be negative (got {reverse})")
    peak = f.optional_quantity("peak_voltage", "voltage")
    f.check(peak is None or peak > 0, "peak_voltage", f"must be positive (got {peak} V)")
    decision = f.choice("decision", DECISIONS, "simple")
    # No k given: k is Student's t at each figure's degrees of freedom (JCGM 100:2008 G.4).
    k = float(f.number("coverage_factor")) if "coverage_factor" in f.data else None
    f.check(k is None or 1 <= k <= 3, "coverage_factor", f"must be 1 to 3 (got {k})")
    p = float(f.number("coverage_probability", 0.95))
    f.check(0.5 <= p <= 0.999, "coverage_probability", f"must be 0.5 to 0.999 (got {p})")
    one = k is None or "coverage_probability" not in f.data
    f.check(one, "coverage_factor", "a fixed k replaces coverage_probability; give one or other")
    shape = _shape(Fields.at(source, "judge.shape", f.raw("shape", {})))
    limits = _figure_limits(source, f.raw("limits", {}))
    if knee_of == "minimum":
        has_min = any(x.figure == "regulated_current" and x.min is not None for x in limits)
        f.check(has_min, "knee_of", "'minimum' needs limits.regulated_current.min")
    bins = _bins(source, f.raw("bins", None))
    _check_pass_gaps(source, bins, limits)
    f.finish()
    return JudgeSettings(
        vt,
        vk,
        fraction,
        knee_current,
        window,
        limits,
        knee_of=knee_of,
        knee_window_v=knee_window,
        reverse_voltage_v=reverse,
        peak_voltage_v=peak,
        decision=decision,
        coverage_factor=k,
        coverage_probability=p,
        shape=shape,
        bins=bins,
        accuracy=accuracy,
    )


def _shape(f: Fields) -> Shape:
    open_below = positive(f, "open_below", "current", "1 uA")
    short_below = positive(f, "short_below", "voltage", "1 V")
    drop = float(f.number("drop_limit", 0.02))
    f.check(0 < drop < 1, "drop_limit", f"must lie between 0 and 1 (got {drop})")
    scatter = float(f.number("scatter_limit", 0.01))
    f.check(0 < scatter < 1, "scatter_limit", f"must lie between 0 and 1 (got {scatter})")
    f.finish()
    return Shape(open_below, short_below, drop, scatter)


def _min_max(g: Fields, kind: str) -> tuple[float | None, float | None]:
    low = g.optional_quantity("min", kind)
    high = g.optional_quantity("max", kind)
    g.check(low is not None or high is not None, "min", "or 'max' must be given")
    g.check(low is None or high is None or low < high, "max", f"must exceed min ({low})")
    return low, high


def _figure_limits(source: Source, value: Any) -> tuple[FigureLimit, ...]:
    f = Fields.at(source, "judge.limits", value)
    out = []
    for figure in FIGURES:
        if figure not in f.data:
            continue
        g = Fields.at(source, f"judge.limits.{figure}", f.raw(figure))
        low, high = _min_max(g, FIGURE_KIND[figure])
        g.finish()
        out.append(FigureLimit(figure, low, high))
    f.finish()
    return tuple(out)


def _names(f: Fields, key: str, allowed: tuple[str, ...]) -> tuple[str, ...]:
    raw = f.raw(key, [])
    items = raw if isinstance(raw, list) else [raw]
    for item in items:
        f.check(item in allowed, key, f"must be one of {', '.join(allowed)} (got {item!r})")
    return tuple(items)


def _bins(source: Source, value: Any) -> tuple[BinRule, ...]:
    if value is None:
        return DEFAULT_BINS
    if not isinstance(value, list) or not value:
        raise source.error("judge.bins", "must be a list of one or more bins")
    rules = [_bin(Fields.at(source, f"judge.bins[{i}]", item)) for i, item in enumerate(value)]
    classes: dict[int, str] = {}
    for index, rule in enumerate(rules):
        if classes.setdefault(rule.number, rule.klass) != rule.klass:
            where = f"judge.bins[{index}].class"
            raise source.error(where, f"differs from an earlier bin {rule.number}; one class a bin")
    if not rules[-1].catch_all:
        raise source.error(
            f"judge.bins[{len(rules) - 1}]",
            "must be a catch-all of class fail (no conditions), so every device lands in a bin",
        )
    return tuple(rules)


def _bin(f: Fields) -> BinRule:
    number = int(f.number("bin", integer=True))
    f.check(0 <= number <= 32767, "bin", f"must be 0 to 32767 (got {number})")
    klass = f.choice("class", ("pass", "fail"), "fail")
    name = f.text("name", "")
    verdicts = _names(f, "verdict", VERDICTS)
    kinds = _names(f, "classification", CLASSIFICATIONS)
    if klass == "pass":
        shipped = set(verdicts) - {"pass", "guard-band"}
        f.check(not shipped, "verdict", "of a pass-class bin may only be pass or guard-band")
        verdicts = verdicts or ("pass",)  # a pass bin never takes a failing part by accident
    ranges = []
    for figure in FIGURES:
        if figure in f.data:
            g = Fields.at(f.source, f.where(figure), f.raw(figure))
            low, high = _min_max(g, FIGURE_KIND[figure])
            g.finish()
            ranges.append(FigureRange(figure, low, high))
    f.finish()
    return BinRule(number, klass, name, verdicts, kinds, tuple(ranges))


# --- station accuracy ---------------------------------------------------------------------


def parse_accuracy(source: Source, value: Any) -> Accuracy:
    if value is None:
        return DEFAULT_ACCURACY
    f = Fields.at(source, "accuracy", value)
    current = _table(source, "accuracy.current", f.raw("current", None), "current")
    voltage = _table(source, "accuracy.voltage", f.raw("voltage", None), "voltage")
    f.finish()
    return Accuracy(current or DEFAULT_ACCURACY.current, voltage or DEFAULT_ACCURACY.voltage)


def _table(source: Source, path: str, value: Any, kind: str) -> AccuracyTable | None:
    if value is None:
        return None
    if not isinstance(value, list) or not value:
        raise source.error(path, "must be a list of ranges, e.g. [{range: 10 mA, gain: 0.05 %, ...")
    rows = []
    for index, item in enumerate(value):
        g = Fields.at(source, f"{path}[{index}]", item)
        full = positive(g, "range", kind)
        gain = _fraction(g, "gain")
        offset = g.quantity("offset", kind)
        g.check(offset >= 0, "offset", f"must not be negative (got {offset})")
        if rows:
            g.check(full > rows[-1].range, "range", "must be larger than the range before it")
        g.finish()
        rows.append(RangeAccuracy(full, gain, offset))
    return AccuracyTable(tuple(rows))


def _fraction(g: Fields, key: str) -> float:
    raw = g.raw(key)
    text = str(raw).strip() if isinstance(raw, str) else ""
    for suffix, factor in (("%", 1e-2), ("ppm", 1e-6)):
        if text.endswith(suffix):
            try:
                value = plain_number(text.removesuffix(suffix)) * factor
            except UnitProblem as exc:
                raise g.source.error(g.where(key), f"{exc}; e.g. '0.05 %'") from None
            g.check(0 <= value < 0.1, key, f"must be 0 to 10 % (got {raw!r})")
            return value
    raise g.source.error(
        g.where(key), f"must be a fraction in % or ppm, e.g. '0.05 %' (got {raw!r})"
    )


def _check_pass_gaps(
    source: Source, rules: tuple[BinRule, ...], limits: tuple[FigureLimit, ...]
) -> None:
    """A part inside every limit must land in a pass bin, or in a fail bin that says so."""
    for gap in pass_gaps(rules, limits):
        problem = (
            f"send a part that passes every limit ({_gap_text(gap)}) to bin "
            f"{rules[gap.bin_index].number}, class fail: bins take min <= value < max; close "
            "the gap (leave the top pass bin's max out where a limit bounds it), or add a fail "
            "bin with that range to mean it"
        )
        raise source.error("judge.bins", problem)


def _gap_text(gap: BinGap) -> str:
    def label(figure: str, value: float) -> str:
        return format_si(value, FIGURE_UNIT[figure])

    if gap.below is not None:
        (figure,) = gap.figures
        span = f"from {label(figure, gap.low[0])} up to {label(figure, gap.below)}"
        return f"{FIGURE_INFO[figure][2]} {span}"
    points = [
        f"{FIGURE_INFO[f][2]} {label(f, v)}" for f, v in zip(gap.figures, gap.low, strict=True)
    ]
    return "at exactly " + " and ".join(points)
