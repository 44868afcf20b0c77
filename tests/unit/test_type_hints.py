"""Public functions of the science package carry type hints: every parameter (but self/cls)
and the return value of each module-level function and each method of a public class whose
name does not start with an underscore (``__init__`` included, its return excepted). Read
with ``ast``; nothing is imported.

Files still being annotated by their owners are listed below, function by function: the list
only shrinks. A new function must come with its hints; one annotated since (or gone) is
reported as a warning until someone removes it from the list.
"""

import ast
import warnings
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
PACKAGE = REPO / "cairn_science"

#: Functions without full hints, per file (relative to cairn_science/). Shrink it.
ALLOWED = {
    "bids/headers.py": [
        "EdfHeader.bytes_per_sample", "EdfHeader.expected_size", "EdfHeader.is_plus",
        "check_brainvision_structure",
    ],
    "bids/names.py": [
        "BidsIgnore.__init__", "BidsIgnore.from_root", "BidsIgnore.ignores", "NameCheck.folder",
    ],
    "bids/readers.py": ["JsonDocument.error", "JsonDocument.warn", "Table.error", "Table.warn"],
    "bids/schema.py": ["NameRule.entity_enum", "NameRule.entity_level"],
    "bids/tables.py": ["check_channels", "check_events", "check_participants", "check_scans"],
    "canonical_json.py": [
        "canonical_bytes", "canonical_sha256", "canonical_text", "without_negative_zero",
    ],
    "features/timedomain.py": [
        "hjorth_complexity", "hjorth_mobility", "line_length", "peak_count", "teager_kaiser_energy",
        "zero_crossings",
    ],
    "learning/learners.py": ["make_learner", "param_problems"],
    "learning/metrics.py": [
        "block_permutation_test", "chance_level", "corrected_resampled_ttest", "holm",
        "paired_comparison", "participant_bootstrap_ci", "per_site", "scores",
        "selection_permutation_test", "selection_report", "smallest_p", "summarise",
    ],
    "learning/spec.py": ["SpecError.__init__", "comparison_problems", "model_problems"],
    "learning/validation.py": ["assert_disjoint", "describe_outer", "inner_splits", "outer_folds"],
    "qc/checks.py": [
        "ChannelCheck.threshold_for", "ChannelCheck.words", "broadband_factor", "check_bridging",
        "check_correlation", "check_deviation", "check_dropout", "check_high_frequency",
        "check_jumps", "check_mains", "check_predictability", "find_jumps",
    ],
    "qc/robust.py": ["quantile"],
    "qc/run.py": ["run_qc", "run_qc_array"],
    "signal/prepare.py": ["prepare"],
    "signal/windows.py": ["cut_windows", "plan_windows"],
}


def _missing(function, in_class):
    args = function.args
    params = args.posonlyargs + args.args + args.kwonlyargs
    if in_class and params and params[0].arg in ("self", "cls"):
        is_static = any(isinstance(d, ast.Name) and d.id == "staticmethod"
                        for d in function.decorator_list)
        if not is_static:
            params = params[1:]
    params += [a for a in (args.vararg, args.kwarg) if a is not None]
    unannotated = [a.arg for a in params if a.annotation is None]
    no_return = function.returns is None and function.name != "__init__"
    return unannotated, no_return


def _public(name):
    return not name.startswith("_") or name == "__init__"


def unannotated(source):
    """Qualified names of the public functions of ``source`` without full hints."""
    found = []
    for node in ast.parse(source).body:
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)) and _public(node.name):
            if any(_missing(node, False)):
                found.append(node.name)
        elif isinstance(node, ast.ClassDef) and not node.name.startswith("_"):
            for item in node.body:
                if (isinstance(item, (ast.FunctionDef, ast.AsyncFunctionDef))
                        and _public(item.name) and any(_missing(item, True))):
                    found.append(f"{node.name}.{item.name}")
    return found


def _scan():
    return {path.relative_to(PACKAGE).as_posix(): unannotated(path.read_text(encoding="utf-8"))
            for path in sorted(PACKAGE.rglob("*.py"))}


def test_the_rule_sees_what_it_forbids():
    """Plumbing on invented code: each way of missing a hint is caught, full hints pass,
    private names and nested functions are not asked for."""
    source = '''
def full(a: int, *rest: str, b: float = 1.0, **more: object) -> None: ...
def no_return(a: int): ...
def bare(a) -> int: ...
def star(*rest) -> None: ...
def _private(a): ...
def outer() -> None:
    def inner(x): ...
class Thing:
    def __init__(self, a: int): ...
    def method(self, a) -> int: ...
    @staticmethod
    def static(a) -> int: ...
    @classmethod
    def make(cls, a: int) -> "Thing": ...
    def _hidden(self, a): ...
class _Private:
    def method(self, a): ...
'''
    assert unannotated(source) == ["no_return", "bare", "star", "Thing.method", "Thing.static"]


def test_public_functions_of_the_science_have_hints():
    """New unannotated public functions fail; an allowance entry annotated since (or gone) is
    reported as a warning: its owner, or the lead, removes it (several people annotate at
    once, so that does not fail)."""
    found = _scan()
    new = {f: sorted(set(names) - set(ALLOWED.get(f, ()))) for f, names in found.items()}
    new = {f: names for f, names in new.items() if names}
    stale = {f: sorted(set(names) - set(found.get(f, ()))) for f, names in ALLOWED.items()}
    stale = {f: names for f, names in stale.items() if names}
    if stale:
        warnings.warn(f"annotated or gone since: remove from ALLOWED in {Path(__file__).name}: "
                      f"{stale}", stacklevel=1)
    assert not new, f"public functions without type hints (annotate them): {new}"
