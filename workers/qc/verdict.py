"""Recording verdict (pass, review, fail) from the protocol's thresholds, with reasons."""

from collections import Counter

ORDER = ("pass", "review", "fail")
MOSTLY_UNRELATED_SHARE = 0.5


def _worst(first, second):
    return first if ORDER.index(first) >= ORDER.index(second) else second


def decide_verdict(*, settings, sfreq_hz, duration_s, n_channels, bad_reasons, n_with_signal,
                   rejected_share, uncorrelated_share=0.0):
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
