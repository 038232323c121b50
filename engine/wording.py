"""Manuscript-ready sentences for results, with one set of rounding rules for all of them.

Pure string formatting: the functions take plain numbers (as found in the results' ``to_dict()``
and the command line's JSON), so the app, the command line and the report all word a result the
same way. Rounding is half-up on the decimal value as printed (``0.0125`` to three places is
``0.013``), not on the binary float, so the same number always gives the same text.

Rules (house conventions, common practice in medical journals):

- times and restricted means: 1 decimal place (``time_digits``);
- survival and incidence: percentages with 1 decimal place;
- hazard ratios and other ratios: 2 decimal places, or 2 significant figures below 0.1;
- test statistics: 2 decimal places;
- p-values: 3 decimal places, ``< 0.001`` below 0.001 and ``> 0.999`` when they would round to 1;
- a missing estimate (``None``) is "not reached" for medians and interval limits of a survival
  quantile, "not estimable" elsewhere.
"""

from __future__ import annotations

import math
from decimal import ROUND_HALF_UP, Context, Decimal

from engine.text_safety import visible_text

NOT_REACHED = "not reached"
NOT_ESTIMABLE = "not estimable"


def _is_missing(value: float | None) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value))


def round_half_up(value: float, digits: int) -> Decimal:
    """Round the shortest decimal form of ``value`` half-up (0.125 -> 0.13), never the float."""
    return _quantize(Decimal(repr(float(value))), digits)


def _quantize(number: Decimal, digits: int) -> Decimal:
    """Half-up to ``digits`` places with as many significant digits as the number needs (the
    default context's 28 would refuse 1e27 to one decimal place)."""
    context = Context(prec=max(28, number.adjusted() + digits + 2))
    return number.quantize(Decimal(1).scaleb(-digits), rounding=ROUND_HALF_UP, context=context)


HUGE = 1e15  # from here on a number is written in powers of ten: 1.00e+27, not 28 digits
TINY = 1e-6  # and below this, where significant figures are wanted (ratios, typed values)


def _scientific(value: float) -> str:
    """Three significant figures and a power of ten, for numbers no reader counts digit by digit."""
    return f"{value:.2e}"


def format_number(value: float | None, digits: int = 1, missing: str = NOT_ESTIMABLE) -> str:
    """A number at a fixed number of decimal places; ``missing`` for None or NaN."""
    if _is_missing(value):
        return missing
    if math.isinf(value):
        return "infinite" if value > 0 else "minus infinite"
    if abs(value) >= HUGE:
        return _scientific(value)
    text = f"{round_half_up(value, digits):f}"
    if text.startswith("-") and Decimal(text) == 0:
        text = text[1:]
    return text


def format_significant(value: float, figures: int) -> str:
    """``figures`` significant figures (0.0048 -> '0.0048' with 2); powers of ten beyond the
    range a reader counts digit by digit."""
    if _is_missing(value) or value == 0 or math.isinf(value):
        return format_number(value, 0)
    if abs(value) >= HUGE or abs(value) < TINY:
        return _scientific(value)
    magnitude = Decimal(repr(float(value))).adjusted()  # the decimal exponent, no float log
    text = format_number(value, max(0, figures - 1 - magnitude))
    if Decimal(text).adjusted() > magnitude:  # 0.0996 -> '0.10': one figure fewer is enough
        text = format_number(value, max(0, figures - 2 - magnitude))
    return text


def format_nonzero(
    value: float | None, digits: int, figures: int = 2, missing=NOT_ESTIMABLE
) -> str:
    """``format_number`` at ``digits`` decimals, except where those decimals would show a
    non-zero value as zero: then ``figures`` significant figures (an SE of 0.0048 at 2 decimals
    is '0.0048', not '0.00'), so a table never hides a value that is there."""
    text = format_number(value, digits, missing)
    if _is_missing(value) or value == 0 or math.isinf(value) or abs(value) >= HUGE:
        return text
    return format_significant(value, figures) if Decimal(text) == 0 else text


def format_plain(value: float) -> str:
    """A caller-chosen value such as a time point: as typed, without trailing zeros (12, 2.5)."""
    if math.isfinite(value) and (abs(value) >= HUGE or 0 < abs(value) < TINY):
        return _scientific(value)
    text = format(Decimal(repr(float(value))).normalize(), "f")
    return text


def format_percent(value: float | None, digits: int = 1, missing: str = NOT_ESTIMABLE) -> str:
    """A proportion in [0, 1] as a percentage: 0.6432 -> '64.3%'."""
    if _is_missing(value):
        return missing
    if math.isinf(value) or abs(value) * 100 >= HUGE:
        return format_number(value * 100, digits) + "%"
    percent = Decimal(repr(float(value))).scaleb(2)  # no float multiplication before rounding
    return f"{_quantize(percent, digits):f}%"


def format_interval(lower, upper, fmt=None) -> str:
    """'0.93 to 1.13'; the missing word once when neither limit exists ("not estimable" for a
    coefficient that runs off to infinity, "not reached" with such a ``fmt``). ``fmt`` formats
    each limit (default ``format_ratio``)."""
    fmt = fmt or format_ratio
    if _is_missing(lower) and _is_missing(upper):
        return fmt(lower)
    return f"{fmt(lower)} to {fmt(upper)}"


def format_ratio(value: float | None, missing: str = NOT_ESTIMABLE) -> str:
    """A hazard ratio or other ratio: 2 decimals, or 2 significant figures below 0.1."""
    if _is_missing(value):
        return missing
    if math.isinf(value) or value <= 0:
        return format_number(value, 2)
    if value < TINY:
        return _scientific(value)
    if value < 0.1:
        digits = 1 - math.floor(math.log10(value))  # 2 significant figures
        text = format_number(value, digits)
        if Decimal(text) >= Decimal("0.1"):  # 0.0996 rounds up into the 2-decimal range
            return format_number(value, 2)
        return text
    return format_number(value, 2)


def format_p(p: float | None) -> str:
    """A p-value: 3 decimals, '< 0.001' below 0.001, '> 0.999' when it would round to 1."""
    if _is_missing(p) or not 0 <= p <= 1:  # outside [0, 1] it is no probability
        return NOT_ESTIMABLE
    if p < 0.001:
        return "< 0.001"
    rounded = round_half_up(p, 3)
    if rounded >= 1 and p < 1:
        return "> 0.999"
    return f"{rounded:f}"


def p_clause(p: float | None) -> str:
    """'p = 0.032' or 'p < 0.001' (no equals sign before an inequality)."""
    text = format_p(p)
    if text[0] in "<>":
        return f"p {text}"
    if text == NOT_ESTIMABLE:
        return "p not estimable"
    return f"p = {text}"


def format_confidence(confidence: float) -> str:
    """0.95 -> '95%', 0.975 -> '97.5%'."""
    return format_plain(round_half_up(confidence * 100.0, 6)) + "%"


def term_label(variable: object, level: object = None, reference: object = None) -> str:
    """A model term in words: 'load_kN' for a number, 'lubricant: dry film vs grease' for one
    level of a category against its reference level (the one label every table and figure uses)."""
    if level is None:
        return str(variable)
    if reference is None:
        return f"{variable}: {level}"
    return f"{variable}: {level} vs {reference}"


def _plain_survival(event: str | None) -> bool:
    return event is None or event == "death"


def median_name(event: str | None = None) -> str:
    """'median survival' when the event is death (or not named), else 'median time to relapse'."""
    return "median survival" if _plain_survival(event) else f"median time to {event}"


def free_name(event: str | None = None) -> str:
    """What a survival curve estimates, in words: 'survival', or 'probability still free of
    relapse' when the event is not death."""
    return "survival" if _plain_survival(event) else f"probability still free of {event}"


def rmst_name(event: str | None = None) -> str:
    """'restricted mean survival time', or 'restricted mean time free of relapse'."""
    if _plain_survival(event):
        return "restricted mean survival time"
    return f"restricted mean time free of {event}"


def probability_title(event: str | None = None) -> str:
    """A survival axis title: 'Survival probability' or 'Probability still free of relapse'."""
    return (
        "Survival probability" if _plain_survival(event) else f"Probability still free of {event}"
    )


def _unit(value: float, unit: str) -> str:
    """'1 year' but '2 years': time units are stored in the plural."""
    if unit.endswith("s") and Decimal(repr(float(value))) == 1:
        return unit[:-1]
    return unit


def _subject(group: str | None, what: str) -> str:
    return f"{what} in group {visible_text(group)}" if group is not None else what


def _interval(lower: str, upper: str, confidence: float) -> str:
    return f"{format_confidence(confidence)} CI {lower} to {upper}"


def median_sentence(
    estimate: float | None,
    lower: float | None,
    upper: float | None,
    unit: str,
    confidence: float = 0.95,
    group: str | None = None,
    quantity: str = "median survival",
    time_digits: int = 1,
) -> str:
    """'Median survival was 23.0 weeks (95% CI 16.0 to not reached).'

    A missing estimate or upper limit means the curve never fell that low: "not reached".
    """
    subject = _subject(group, quantity)
    subject = subject[0].upper() + subject[1:]
    low = format_number(lower, time_digits, missing=NOT_REACHED)
    high = format_number(upper, time_digits, missing=NOT_REACHED)
    interval = _interval(low, high, confidence)
    if _is_missing(estimate):
        return f"{subject} was not reached ({interval})."
    return f"{subject} was {format_number(estimate, time_digits)} {unit} ({interval})."


def survival_at_sentence(
    time: float,
    survival: float | None,
    lower: float | None,
    upper: float | None,
    unit: str,
    confidence: float = 0.95,
    group: str | None = None,
    at_risk: int | None = None,
    event: str | None = None,
    after: str = "",
) -> str:
    """'Survival at 12 months was 64.3% (95% CI 55.1% to 72.0%), with 48 still at risk.'

    With ``event`` other than death: 'Probability still free of relapse at 12 months was …';
    ``after`` follows the time ('… at 12 months after the landmark was …')."""
    when = f"{format_plain(time)} {_unit(time, unit)}" + (f" {after}" if after else "")
    subject = _subject(group, f"{free_name(event)} at {when}")
    subject = subject[0].upper() + subject[1:]
    interval = _interval(format_percent(lower), format_percent(upper), confidence)
    sentence = f"{subject} was {format_percent(survival)} ({interval})"
    if at_risk is not None:
        sentence += f", with {int(at_risk)} still at risk"
    return sentence + "."


def hazard_ratio_sentence(
    hazard_ratio: float | None,
    lower: float | None,
    upper: float | None,
    p_value: float | None,
    variable: str,
    level: str | None = None,
    reference: str | None = None,
    confidence: float = 0.95,
    unit_of_change: str | None = None,
) -> str:
    """'The hazard ratio for treatment B versus A was 0.62 (95% CI 0.45 to 0.85; p = 0.003).'

    For a numeric covariate, the ratio is per one unit (or per ``unit_of_change``) increase.
    """
    variable = visible_text(variable)  # labels come from the file: direction controls as codes
    level = None if level is None else visible_text(level)
    reference = None if reference is None else visible_text(reference)
    if level is not None:
        what = f"{variable} {level} versus {reference}" if reference else f"{variable} {level}"
    else:
        what = f"each {unit_of_change or 'one-unit'} increase in {variable}"
    if _is_missing(lower) and _is_missing(upper) and _is_missing(p_value):
        # a coefficient that runs off to infinity: where the fit stopped is no estimate
        return (
            f"The hazard ratio for {what} could not be estimated: its coefficient runs off to "
            "infinity (monotone likelihood)."
        )
    interval = _interval(format_ratio(lower), format_ratio(upper), confidence)
    return (
        f"The hazard ratio for {what} was {format_ratio(hazard_ratio)} "
        f"({interval}; {p_clause(p_value)})."
    )


def comparison_sentence(
    test: str,
    statistic: float | None,
    df: float | None,
    p_value: float | None,
) -> str:
    """'Log-rank test: chi-squared 16.79 on 1 degree of freedom, p < 0.001.'"""
    name = test[0].upper() + test[1:]
    if _is_missing(df):
        return f"{name} test: statistic {format_number(statistic, 2)}, {p_clause(p_value)}."
    df_text = format_plain(df)
    freedom = "degree" if Decimal(df_text) == 1 else "degrees"
    return (
        f"{name} test: chi-squared {format_number(statistic, 2)} on {df_text} "
        f"{freedom} of freedom, {p_clause(p_value)}."
    )


def rmst_sentence(
    estimate: float | None,
    lower: float | None,
    upper: float | None,
    horizon: float,
    unit: str,
    confidence: float = 0.95,
    group: str | None = None,
    time_digits: int = 1,
) -> str:
    """'Restricted mean survival time to 24 months was 18.2 months (95% CI 16.9 to 19.5).'"""
    subject = _subject(
        group, f"restricted mean survival time to {format_plain(horizon)} {_unit(horizon, unit)}"
    )
    subject = subject[0].upper() + subject[1:]
    low = format_number(lower, time_digits)
    high = format_number(upper, time_digits)
    estimate_text = format_number(estimate, time_digits)
    return f"{subject} was {estimate_text} {unit} ({_interval(low, high, confidence)})."


def hazard_ratio_direction(hazard_ratio: float) -> str:
    """What a planned hazard ratio means: experimental against control, below 1 fewer events."""
    ratio = format_plain(hazard_ratio)
    if hazard_ratio < 1:
        effect = "fewer events in the experimental group than in the control group"
    elif hazard_ratio > 1:
        effect = "more events in the experimental group than in the control group"
    else:
        effect = "no difference"
    return (
        f"The hazard ratio is the experimental group's hazard divided by the control group's "
        f"(below 1: fewer events in the experimental group). A hazard ratio of {ratio} means "
        f"{effect}."
    )


# --- sentences for whole results, from their JSON form (the command line's schema 2) ------------


def curve_sentences(
    curve: dict, unit: str, confidence: float = 0.95, event: str | None = None, after: str = ""
) -> list[str]:
    """The median and each survival-at-time of one ``curves`` entry, as sentences; ``event``
    names the event (``median_name``), ``after`` adds words such as 'after the landmark'."""
    group = None if curve.get("group") is None else str(curve["group"])
    median = curve["median"]
    quantity = median_name(event) + (f" {after}" if after else "")
    sentences = [
        median_sentence(
            median["estimate"],
            median["lower"],
            median["upper"],
            unit,
            confidence,
            group,
            quantity=quantity,
        )
    ]
    for point in curve.get("at_times", []):
        sentences.append(
            survival_at_sentence(
                point["time"],
                point["survival"],
                point["lower"],
                point["upper"],
                unit,
                confidence,
                group,
                point.get("at_risk"),
                event,
                after,
            )
        )
    return sentences


def cox_sentences(cox: dict, confidence: float = 0.95) -> list[str]:
    """One hazard-ratio sentence per term of the ``cox`` object."""
    return [
        hazard_ratio_sentence(
            term["hazard_ratio"],
            term["lower"],
            term["upper"],
            term["p_value"],
            str(term["variable"]),
            None if term.get("level") is None else str(term["level"]),
            None if term.get("reference") is None else str(term["reference"]),
            confidence,
        )
        for term in cox.get("terms", [])
    ]
