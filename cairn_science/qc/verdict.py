"""Recording verdict (pass, review, fail) from the protocol's thresholds, with reasons."""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from .settings import QCSettings

ORDER = ("pass", "review", "fail")
#: Each verdict in the words pages and model cards show for it.
VERDICT_WORDS = {"pass": "usable", "review": "needs a look", "fail": "not usable"}
MOSTLY_UNRELATED_SHARE = 0.5


def _worst(first, second):
    return first if ORDER.index(first) >= ORDER.index(second) else second


def decide_verdict(*, settings: QCSettings, sfreq_hz: float, duration_s: float, n_channels: int,
                   bad_reasons: Mapping[str, Sequence[str]], n_with_signal: int,
                   rejected_share: float,
                   uncorrelated_share: float = 0.0) -> tuple[str, list[str]]:
    """Verdict and its reasons in words.

    ``bad_reasons`` maps each bad channel to the words of its reasons. Fails: sampling rate
    below ``min_sfreq_hz``, no channel with signal, or a share of bad channels or of rejected
    time at or above the fail threshold. Review: a share at or above the review threshold, or
    a recording shorter than ``min_duration_s`` (too short to judge well, not unusable).
    ``uncorrelated_share`` (channels that do not follow the others) adds a hint when most
    channels share no common signal.
    """
    verdict = "pass"
    reasons = []
    if sfreq_hz < settings.min_sfreq_hz:
        verdict = "fail"
        reasons.append(f"sampling rate {sfreq_hz:g} Hz is below the protocol's minimum of "
                       f"{settings.min_sfreq_hz:g} Hz")
    if n_with_signal == 0:
        verdict = "fail"
        reasons.append("no channel carries a signal")

    n_bad = len(bad_reasons)
    share = n_bad / n_channels if n_channels else 1.0
    level = "pass"
    if share >= settings.bad_channel_share_fail:
        level = "fail"
    elif share >= settings.bad_channel_share_review:
        level = "review"
    if level != "pass":
        counts = Counter(words for words_list in bad_reasons.values() for words in words_list)
        listed = "; ".join(f"{words} ({count})" for words, count in counts.most_common())
        reasons.append(
            f"{n_bad} of {n_channels} channels are bad ({share:.0%}; review from "
            f"{settings.bad_channel_share_review:.0%}, fail from "
            f"{settings.bad_channel_share_fail:.0%}): {listed}"
        )
        verdict = _worst(verdict, level)
    if uncorrelated_share >= MOSTLY_UNRELATED_SHARE:
        reasons.append(
            f"{uncorrelated_share:.0%} of the channels do not follow each other: the recording "
            "carries no common brain signal (check reference, ground and amplifier)"
        )

    level = "pass"
    if rejected_share >= settings.rejected_time_share_fail:
        level = "fail"
    elif rejected_share >= settings.rejected_time_share_review:
        level = "review"
    if level != "pass":
        reasons.append(
            f"{rejected_share:.0%} of the time is rejected (review from "
            f"{settings.rejected_time_share_review:.0%}, fail from "
            f"{settings.rejected_time_share_fail:.0%})"
        )
        verdict = _worst(verdict, level)

    if duration_s < settings.min_duration_s:
        reasons.append(f"recording lasts {duration_s:.0f} s, shorter than the protocol's "
                       f"minimum of {settings.min_duration_s:g} s")
        verdict = _worst(verdict, "review")

    if not reasons:
        reasons.append(
            f"{n_bad} of {n_channels} channels bad and {rejected_share:.0%} of the time "
            "rejected: within the protocol's limits"
        )
    return verdict, reasons


PERSON_BAD_WORDS = "set bad by a person"
MOSTLY_SILENT_SHARE = 0.5
_INPUTS = ("sfreq_hz", "duration_s", "n_with_signal", "rejected_share", "uncorrelated_share")


def channel_verdict(*, settings: QCSettings, inputs: Mapping[str, float],
                    channels: Mapping[str, tuple[str, Sequence[str]]]) -> tuple[str, list[str]]:
    """The verdict rule over plain data, for the checks and for people's decisions alike.

    ``inputs`` holds the recording's ``sfreq_hz``, ``duration_s``, ``n_with_signal``,
    ``rejected_share`` and ``uncorrelated_share`` (see :func:`decide_verdict`);
    ``channels`` maps every channel to (status, words of its reasons). Returns (verdict,
    reasons in words).
    """
    bad_reasons = {name: list(words) for name, (status, words) in channels.items()
                   if status == "bad"}
    return decide_verdict(settings=settings, n_channels=len(channels), bad_reasons=bad_reasons,
                          **{key: inputs[key] for key in _INPUTS})


def stored_inputs(result: Mapping) -> dict[str, float]:
    """The verdict's inputs of a stored result (``QCResult.as_dict()``). Results stored
    before they were kept whole are read from the rounded fields and the channels."""
    if "verdict_inputs" in result:
        return result["verdict_inputs"]
    channels = result["channels"]
    silent = {name for name, info in channels.items()
              if (info.get("metrics", {}).get("dropout") or 0.0) >= MOSTLY_SILENT_SHARE}
    usable = [info for name, info in channels.items()
              if name not in silent and not info.get("marked_by_site")]
    uncorrelated = sum(1 for info in usable
                       if any(r["check"] == "correlation" for r in info.get("reasons", [])))
    return {"sfreq_hz": result["sfreq_hz"], "duration_s": result["duration_s"],
            "n_with_signal": len(channels) - len(silent),
            "rejected_share": result["rejected_share"],
            "uncorrelated_share": uncorrelated / max(1, len(usable))}


def effective_verdict(result: Mapping, statuses: Mapping[str, str], *,
                      settings: QCSettings) -> dict:
    """The verdict of a stored result after people's channel decisions.

    ``result`` is ``QCResult.as_dict()`` as stored (never changed here); ``statuses`` maps
    channels a person decided on to "good" or "bad". A channel set bad by a person counts
    with the words "set bad by a person" (its checks' words if they found it bad too).
    Returns a dict: verdict, verdict_reasons, n_bad_channels, n_channels, bad_channels.
    """
    channels = {}
    for name, info in result["channels"].items():
        words = [reason["words"] for reason in info.get("reasons", [])]
        status = statuses.get(name, info["status"])
        if status == "bad" and not (info["status"] == "bad" and words):
            words = [PERSON_BAD_WORDS]
        channels[name] = (status, words)
    verdict, reasons = channel_verdict(settings=settings, inputs=stored_inputs(result),
                                       channels=channels)
    bad = [name for name, (status, _) in channels.items() if status == "bad"]
    return {"verdict": verdict, "verdict_reasons": reasons, "n_bad_channels": len(bad),
            "n_channels": len(channels), "bad_channels": bad}
