"""The quality checks' measurements in words, with units and the side of the threshold that
is bad (from cairn_science.qc.checks.MEASURES and the QCSettings field names)."""

from django import template

from cairn_science.qc.checks import measure_legend, measure_words
from cairn_science.qc.settings import QCSettings, setting_words

register = template.Library()


@register.filter
def measure(check):
    """A check's measurement with its unit."""
    return measure_words(str(check))[0]


@register.simple_tag
def bad_when(reason):
    """Which side of the threshold is bad, for one stored reason (check, value, threshold)."""
    return measure_words(str(reason.get("check", "")), reason.get("value"),
                         reason.get("threshold"))[1]


@register.filter
def setting(name):
    """A quality setting's name in words with its unit."""
    return setting_words(str(name))


@register.simple_tag
def measures_of(settings):
    """[(measurement with unit, when it is bad)] under a round's settings (the checks'
    thresholds the round does not set are QCSettings' defaults, as the worker runs them)."""
    return measure_legend(QCSettings.from_stored(dict(settings or {})).as_dict())
