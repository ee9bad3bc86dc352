"""A validated recipe file (format.recipe.RecipeFile) -> the frozen parts of recipe.load.Recipe.

The format checked every key, type, unit and the rules of each section. The cross-field rules
left here are named as such: step names unique across steps, the bins together (one class a
bin number, a catch-all last), the recipe's limits against the station's. The figures steps
against the judge are checked in figuresstep.check_against_judge.
"""

from __future__ import annotations

from typing import Any

from sequencer.judge.bins import BinGap, pass_gaps
from sequencer.judge.devicetempco import TempCoLimits
from sequencer.model.accuracy import DEFAULT_ACCURACY, Accuracy
from sequencer.model.judgesettings import (
    DEFAULT_BINS,
    FIGURE_INFO,
    FIGURE_UNIT,
    FIGURES,
    BinRule,
    FigureLimit,
    FigureRange,
    JudgeSettings,
    Shape,
)
from sequencer.model.units import format_si
from sequencer.recipe.format import judge as judge_form
from sequencer.recipe.format import recipe as form
from sequencer.recipe.format.errors import validated
from sequencer.recipe.limits import LimitRaised, Limits, Ratings, RecipeLimits
from sequencer.recipe.repeat import Repeat
from sequencer.recipe.retest import RetestPolicy
from sequencer.recipe.serials import SerialRule
from sequencer.recipe.steps import FiguresStep, SpotStep, Step, SweepStep
from sequencer.recipe.temperatures import SetPoint
from sequencer.recipe.yamlsource import Source

# --- steps --------------------------------------------------------------------------------------


def steps(source: Source, items: list[Any]) -> tuple[Step, ...]:
    built = tuple(_step(item, index) for index, item in enumerate(items))
    check_step_names(source, built)
    return built


def _step(item: Any, index: int) -> Step:
    if item.kind == "sweep":
        s = item.sweep
        name = f"sweep{index + 1}" if s.name is None else s.name
        return SweepStep(name, s.start, s.stop, s.level_count, s.compliance, s.settle,
                         s.on_compliance)  # fmt: skip
    if item.kind == "spot":
        p = item.spot
        name = f"spot{index + 1}" if p.name is None else p.name
        return SpotStep(name, p.voltage, p.compliance, p.repeats, p.settle, p.on_compliance)
    f = item.figures
    return FiguresStep(
        f"figures{index + 1}" if f.name is None else f.name,
        f.compliance,
        f.settle,
        f.test_window_readings,
        f.knee_window_readings,
        f.repeats,
        f.knee_resolution,
        f.typical_limiting_voltage,
        f.search_from,
        f.max_search_points,
        f.on_compliance,
    )


def check_step_names(source: Source, built: tuple[Step, ...]) -> None:
    """Cross-field rule: a step name names one step (records and reports key on it)."""
    names = [s.name for s in built]
    for index, name in enumerate(names):
        if names.index(name) != index:
            raise source.error(f"steps[{index}]", f"repeats the step name '{name}'")


# --- judge --------------------------------------------------------------------------------------


def judge(source: Source, j: judge_form.Judge, accuracy: Accuracy) -> JudgeSettings:
    limits, rules = _figure_limits(j.limits), bins(source, j.bins)
    check_pass_gaps(source, rules, limits)
    return JudgeSettings(
        j.test_voltage,
        j.knee_voltage,
        float(j.knee_fraction),
        j.knee_current,
        j.slope_window,
        limits,
        knee_of=j.knee_of,
        knee_window_v=j.knee_window,
        reverse_voltage_v=j.reverse_voltage,
        peak_voltage_v=j.peak_voltage,
        decision=j.decision,
        coverage_factor=None if j.coverage_factor is None else float(j.coverage_factor),
        coverage_probability=float(j.coverage_probability),
        shape=_shape(j.shape),
        bins=rules,
        accuracy=accuracy,
    )


def _shape(s: judge_form.Shape) -> Shape:
    return Shape(s.open_below, s.short_below, float(s.drop_limit), float(s.scatter_limit))


def _figure_limits(limits: Any) -> tuple[FigureLimit, ...]:
    return tuple(
        FigureLimit(figure, span.min, span.max)
        for figure in FIGURES
        if (span := getattr(limits, figure)) is not None
    )


def bins(source: Source, written: list[Any] | None) -> tuple[BinRule, ...]:
    if written is None:
        return DEFAULT_BINS
    rules = tuple(_bin(b) for b in written)
    check_bins_together(source, rules)
    return rules


def _bin(b: Any) -> BinRule:
    verdicts = b.verdict
    if b.klass == "pass":
        verdicts = verdicts or ("pass",)  # a pass bin never takes a failing part by accident
    ranges = tuple(
        FigureRange(figure, span.min, span.max)
        for figure in FIGURES
        if (span := getattr(b, figure)) is not None
    )
    return BinRule(b.bin, b.klass, b.name, verdicts, b.classification, ranges)


def check_bins_together(source: Source, rules: tuple[BinRule, ...]) -> None:
    """Cross-field rule: one class a bin number, and a catch-all last so every device lands."""
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


def check_pass_gaps(
    source: Source, rules: tuple[BinRule, ...], limits: tuple[FigureLimit, ...]
) -> None:
    """Cross-field rule: a part inside every limit lands in a pass bin, or in a fail bin that
    says so (sequencer.judge.bins.pass_gaps)."""
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


# --- the run's own rules ------------------------------------------------------------------------

LIMIT_UNITS = (("max_voltage", "V"), ("max_current", "A"), ("max_power", "W"))


def recipe_limits(
    source: Source, written: form.RecipeLimits | None, station: Limits
) -> RecipeLimits:
    """Cross-field rule: a recipe can lower a station limit, never raise it (a safety refusal)."""
    if written is None:
        return RecipeLimits()
    found: dict[str, float] = {}
    for key, unit in LIMIT_UNITS:
        value = getattr(written, key)
        if value is None:
            continue
        ceiling = getattr(station, f"{key}_{unit.lower()}")
        if value > ceiling:
            path = f"limits.{key}"
            problem = (
                f"must be at most {format_si(ceiling, unit)}, the station's limit (got "
                f"{format_si(value, unit)}); a recipe can lower a station limit, never raise it"
            )
            raise LimitRaised(source.file, source.line(path), path, problem)
        found[f"{key}_{unit.lower()}"] = value
    return RecipeLimits(**found)


def ratings(written: form.Ratings | None) -> Ratings:
    if written is None:
        return Ratings()
    return Ratings(written.peak_operating_voltage, written.max_dissipation,
                   written.worst_case_current)  # fmt: skip


def repeat(written: form.Repeat | None) -> Repeat | None:
    return None if written is None else Repeat(written.every, written.for_, written.rounds)


def part_by_part(written: form.PartByPart | None) -> RetestPolicy:
    if written is None:
        return RetestPolicy()
    serials = SerialRule(written.serials.case, written.serials.drop)
    return RetestPolicy(written.retests, written.retest_passed, written.result,
                        written.serial_pattern, serials)  # fmt: skip


def temperatures(written: list[Any] | None) -> tuple[SetPoint, ...]:
    if written is None:
        return ()
    return tuple(
        SetPoint(celsius=p)
        if isinstance(p, float)
        else SetPoint(celsius=p.set, band_k=p.band, soak_s=p.for_, timeout_s=p.timeout)
        for p in written
    )


def tempco(written: form.TempCo | None) -> TempCoLimits:
    if written is None:
        return TempCoLimits()
    return TempCoLimits(min_pct_per_k=written.min, max_pct_per_k=written.max)


# --- one section alone (a recipe text stored with a run, a test of one section) -----------------


def parse_judge(source: Source, value: Any, accuracy: Accuracy = DEFAULT_ACCURACY) -> JudgeSettings:
    return judge(source, validated(judge_form.Judge, source, value, "judge"), accuracy)


def parse_part_by_part(source: Source, value: Any) -> RetestPolicy:
    if value is None:
        return RetestPolicy()
    return part_by_part(validated(form.PartByPart, source, value, "part_by_part"))
