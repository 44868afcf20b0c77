"""What a channel is treated as when its channels.tsv gives type ``n/a`` (unknown).

BIDS allows ``n/a`` in any table cell. A channel of unknown type whose name is an electrode
of the 10-20 system (with its 10-10 extension, as in Cairn's position template) is treated as
EEG, since that name says where on the scalp it sits; any other is treated as MISC and left
out of EEG checks and features.
"""

from __future__ import annotations

MISSING = "n/a"


def type_for_unknown(name: str) -> str:
    """The type a channel of type n/a is treated as: "EEG" for a 10-20 electrode name (any
    case, classic or modern), else "MISC"."""
    from cairn_science.qc.positions import template_position

    return "EEG" if template_position(name.strip()) is not None else "MISC"

