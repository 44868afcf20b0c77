"""Codes in plain words: one mapping per vocabulary, each defined beside the code's own table
(the science's scheme, learner and label tables, the apps' state and kind choices). Pages show
``{{ code|words:"scheme" }}`` (portal/dashboard/templatetags/words.py), never the code itself;
files and the API keep the codes.
"""

from functools import cache


@cache
def vocabularies():
    """{vocabulary: {code: words}}, built once (the learner table imports on first use)."""
    from cairn_science.learning.learners import LEARNERS
    from cairn_science.learning.spec import LABEL_KIND_WORDS, NORMALISATION_WORDS
    from cairn_science.learning.validation import SCHEME_WORDS
    from portal.datasets.models import UPLOAD_SOURCE_WORDS, UploadMode, UploadState
    from portal.jobs.models import JobState
    from portal.quality.models import ChannelStatus, Verdict
    from portal.training.models import (
        EVALUATION_WORDS,
        RELEASE_KIND_WORDS,
        ReleaseState,
        RunState,
    )

    return {
        "scheme": dict(SCHEME_WORDS),
        "learner": {name: learner.title for name, learner in LEARNERS.items()},
        "label_kind": dict(LABEL_KIND_WORDS),
        "normalisation": dict(NORMALISATION_WORDS),
        "evaluation": dict(EVALUATION_WORDS),
        "release_kind": dict(RELEASE_KIND_WORDS),
        "release_state": dict(ReleaseState.choices),
        # A run, a feature set and a job share the job states' words (queued -> waiting).
        "state": {**dict(JobState.choices), **dict(RunState.choices)},
        "upload_state": dict(UploadState.choices),
        "upload_mode": dict(UploadMode.choices),
        "upload_source": dict(UPLOAD_SOURCE_WORDS),
        "verdict": dict(Verdict.choices),
        "channel_status": dict(ChannelStatus.choices),
    }


def words(code, vocabulary):
    """``code`` of ``vocabulary`` in words; an unknown code is shown as it is (a new code
    without words is a bug the page-words test finds)."""
    if code is None or code == "":
        return ""
    return vocabularies()[vocabulary].get(str(code), str(code))
