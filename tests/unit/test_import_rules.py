"""The house's never-rules, read from the source with ``ast`` (nothing is imported, so this
runs without Django): every ``import`` and ``from ... import`` statement in cairn_science/ and
portal/, at the top of a module or inside a function, and every literal
``importlib.import_module("...")``.

1. The science (cairn_science) never imports django, celery or portal.
2. Only URL configurations import ``views`` modules: an app's own urls.py its views, the
   project's (portal/urls.py, portal/api_urls.py) every app's. Anything else a view does that
   another module needs (an access rule, a download) lives in a module of its own (access.py,
   downloads.py, services.py) that both import. No module imports a ``management.commands``
   module.
3. Job handlers are named only in the job-kind table (portal/jobs/kinds.py, as
   "module:function" strings): no module imports a handler function, no other module spells a
   handler's "module:function" path, and a handler module (portal/<app>/jobs.py,
   portal/jobs/probe.py) is imported only by other handler modules (worker code sharing a step,
   e.g. reproduction computing a feature part again), never by the web side (views, services,
   models, urls, forms, commands...).
4. portal/audit is the floor: it imports no portal app but portal.accounts (and the project's
   own non-app modules such as portal.spreadsheet).

Migrations are left out (Django writes them). Run with ``-s`` to see the count of imports
inside functions per package.
"""

import ast
import warnings
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
SCANNED = ("cairn_science", "portal")
KINDS_FILE = REPO / "portal" / "jobs" / "kinds.py"
KINDS_MODULE = "portal.jobs.kinds"
PROJECT_URLCONFS = {"portal.urls", "portal.api_urls"}


@dataclass(frozen=True)
class Import:
    module: str  # the importing module, dotted
    path: str  # its file, relative to the repository
    line: int
    targets: tuple  # every dotted name the statement may load ("from a import b": a and a.b)
    names: tuple  # the names bound by "from a import ..." (empty for "import a")
    source: str  # the imported module as written, resolved if relative
    in_function: bool

    def where(self):
        return f"{self.path}:{self.line} ({self.module} imports {self.source})"


def _module_name(path):
    parts = list(path.relative_to(REPO).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _python_files():
    for top in SCANNED:
        for path in sorted((REPO / top).rglob("*.py")):
            if "migrations" in path.relative_to(REPO).parts:
                continue
            yield path


def _absolute(module, is_package, level, name):
    """The absolute module a relative import names (``from ..x import y`` in a.b.c -> a.x)."""
    if not level:
        return name or ""
    base = module.split(".")
    if not is_package:
        base = base[:-1]
    base = base[: len(base) - (level - 1)]
    return ".".join(base + ([name] if name else []))


def _scan(path):
    return _scan_source(_module_name(path), path.relative_to(REPO).as_posix(),
                        path.read_text(encoding="utf-8"), path.name == "__init__.py")


def _scan_source(module, rel, text, is_package=False):
    tree = ast.parse(text, filename=rel)
    found = []

    def visit(node, in_function):
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.Import):
                for alias in child.names:
                    found.append(Import(module, rel, child.lineno, (alias.name,), (),
                                        alias.name, in_function))
            elif isinstance(child, ast.ImportFrom):
                source = _absolute(module, is_package, child.level, child.module)
                names = tuple(alias.name for alias in child.names)
                targets = (source,) + tuple(f"{source}.{n}" for n in names if n != "*")
                found.append(Import(module, rel, child.lineno, targets, names, source,
                                    in_function))
            elif (isinstance(child, ast.Call) and child.args
                  and isinstance(child.args[0], ast.Constant)
                  and isinstance(child.args[0].value, str)
                  and ast.unparse(child.func) in ("importlib.import_module", "import_module")):
                name = child.args[0].value
                found.append(Import(module, rel, child.lineno, (name,), (), name, in_function))
            nested = in_function or isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef,
                                                       ast.Lambda))
            visit(child, nested)

    visit(tree, False)
    return module, tree, found


def _load():
    modules, imports = {}, []
    for path in _python_files():
        module, tree, found = _scan(path)
        modules[module] = (path, tree)
        imports.extend(found)
    return modules, imports


MODULES, IMPORTS = _load()


def _under(name, prefix):
    return name == prefix or name.startswith(prefix + ".")


def _app_of(module):
    """The portal app a module belongs to (``portal.quality.views`` -> ``quality``), or None
    for the project's own modules (portal/settings.py, portal/spreadsheet.py, ...)."""
    parts = module.split(".")
    if parts[0] != "portal" or len(parts) < 2:
        return None
    if (REPO / "portal" / parts[1]).is_dir():
        return parts[1]
    return None


def _handlers():
    """The "module:function" strings of the job-kind table, read from its source."""
    tree = ast.parse(KINDS_FILE.read_text(encoding="utf-8"))
    handlers = set()
    for call in ast.walk(tree):
        if isinstance(call, ast.Call) and ast.unparse(call.func) == "JobKind":
            if len(call.args) >= 3 and isinstance(call.args[2], ast.Constant):
                handlers.add(call.args[2].value)
            for keyword in call.keywords:
                if keyword.arg == "handler":
                    handlers.add(keyword.value.value)
    return {tuple(h.split(":")) for h in handlers}


HANDLERS = _handlers()
HANDLER_MODULES = {module for module, _ in HANDLERS}


def _fail(broken, rule):
    if broken:
        lines = "\n  ".join(sorted(set(broken)))
        pytest.fail(f"{rule}:\n  {lines}")


def test_the_scan_sees_the_house():
    """Plumbing: the scan reads both packages, finds imports at both depths, and the kind
    table has handlers whose modules exist (so the rules below cannot pass on nothing)."""
    assert any(_under(m, "cairn_science.bids") for m in MODULES)
    assert any(_under(m, "portal.jobs") for m in MODULES)
    assert any(i.in_function for i in IMPORTS) and any(not i.in_function for i in IMPORTS)
    assert len(HANDLERS) >= 5
    missing = sorted(m for m in HANDLER_MODULES if m not in MODULES)
    assert not missing, f"the job-kind table names modules that do not exist: {missing}"
    for module, function in HANDLERS:
        tree = MODULES[module][1]
        defined = {n.name for n in tree.body if isinstance(n, ast.FunctionDef)}
        assert function in defined, f"{module} defines no function {function}"


def science_breaks(imports):
    return [
        i.where() for i in imports
        if _under(i.module, "cairn_science")
        and any(_under(t, banned) for t in i.targets for banned in ("django", "celery", "portal"))
    ]


def views_breaks(imports):
    broken = []
    for i in imports:
        if i.module in PROJECT_URLCONFS:
            continue
        for target in i.targets:
            parts = target.split(".")
            if len(parts) >= 3 and parts[0] == "portal" and parts[2] == "views":
                own_urls = i.module == f"portal.{parts[1]}.urls"
                if not own_urls:
                    broken.append(i.where())
    return broken


def command_breaks(imports):
    return [i.where() for i in imports
            if any(".management.commands" in f".{t}" for t in i.targets)]


def handler_name_breaks(imports, modules, handlers):
    broken = []
    for i in imports:
        for module, function in handlers:
            if i.source == module and function in i.names:
                broken.append(i.where() + f" names handler {function}")
    paths = {f"{m}:{f}" for m, f in handlers}
    for module, (path, tree) in modules.items():
        if module == KINDS_MODULE:
            continue
        for node in ast.walk(tree):
            if isinstance(node, ast.Constant) and node.value in paths:
                broken.append(f"{path}:{node.lineno} spells {node.value}")
    return broken


def handler_module_breaks(imports, handler_modules):
    return [
        i.where() for i in imports
        if i.module not in handler_modules
        and any(t in handler_modules for t in i.targets)
    ]


AUDIT_MAY_IMPORT = ("portal.audit", "portal.accounts")


def audit_breaks(imports):
    return [
        i.where() for i in imports
        if _under(i.module, "portal.audit")
        and any(_app_of(t) is not None and not any(_under(t, ok) for ok in AUDIT_MAY_IMPORT)
                for t in i.targets)
    ]


def test_the_rules_catch_what_they_forbid():
    """Plumbing, on invented modules: each rule reports the import it forbids (at the top
    level and inside a function) and lets the allowed neighbour pass."""
    sources = {
        "cairn_science.qc.bad": "import numpy\ndef f():\n    from django.conf import settings\n",
        "cairn_science.qc.bad2": "from portal.quality import models\n",
        "portal.quality.views": "from portal.quality import services\n",
        "portal.quality.urls": "from portal.quality import views\n",
        "portal.dashboard.overview": "def f():\n    from portal.quality.views import page\n",
        "portal.quality.api": "from portal.quality.views import download_derivative\n",
        "portal.datasets.api": "import importlib\n"
                               "m = importlib.import_module('portal.jobs.management.commands.x')\n",
        "portal.quality.services": "from portal.quality.jobs import run_recording\n"
                                   "K = 'portal.quality.jobs:run_recording'\n",
        "portal.features.jobs": "from portal.quality.jobs import read_raw\n",
        "portal.audit.derived": "from portal.accounts.models import Site\n"
                                "def f():\n    from portal.datasets import models\n",
    }
    imports, modules = [], {}
    for name, text in sources.items():
        _, tree, found = _scan_source(name, name.replace(".", "/") + ".py", text)
        imports.extend(found)
        modules[name] = (name.replace(".", "/") + ".py", tree)
    handlers = {("portal.quality.jobs", "run_recording"), ("portal.features.jobs", "run_set")}
    handler_modules = {m for m, _ in handlers}

    def who(lines):
        return sorted({line.split(" ")[0].rsplit(":", 1)[0] for line in lines})

    assert who(science_breaks(imports)) == ["cairn_science/qc/bad.py", "cairn_science/qc/bad2.py"]
    assert who(views_breaks(imports)) == ["portal/dashboard/overview.py",
                                          "portal/quality/api.py"]
    assert who(command_breaks(imports)) == ["portal/datasets/api.py"]
    assert len(handler_name_breaks(imports, modules, handlers)) == 2
    assert who(handler_module_breaks(imports, handler_modules)) == ["portal/quality/services.py"]
    assert who(audit_breaks(imports)) == ["portal/audit/derived.py"]


def test_science_never_imports_django_celery_or_portal():
    _fail(science_breaks(IMPORTS), "cairn_science imports the web side")


def test_only_url_configurations_import_views():
    _fail(views_breaks(IMPORTS), "imports of a views module outside URL configurations")


#: Known breaks of the command rule, each with what would end it (the lead shrinks this).
COMMAND_ALLOWANCE = {
    ("portal.datasets.management.commands.restore_version",
     "portal.datasets.management.commands.upload_bids"):
        "restore_version reuses upload_bids' Command; move what both use into a module of "
        "portal/datasets",
}


def _fail_beyond(broken, allowance, rule):
    """Fail on breaks not in ``allowance`` ({(importer, imported): why}); an allowance that no
    longer happens is reported as a warning (others are ending them while this list is read:
    remove it then)."""
    allowed = {f"({m} imports {t})" for m, t in allowance}
    seen = {line[line.index("("):] for line in broken}
    stale = sorted(allowed - seen)
    if stale:
        warnings.warn(f"{rule}: allowances no longer needed, remove them from "
                      f"{Path(__file__).name}: {stale}", stacklevel=2)
    _fail([line for line in broken if line[line.index("("):] not in allowed], rule)


def test_no_module_imports_a_management_command():
    _fail_beyond(command_breaks(IMPORTS), COMMAND_ALLOWANCE,
                 "imports of management commands (put the shared code in a module of the app)")


def test_handler_functions_are_named_only_in_the_kind_table():
    modules = {m: (p.relative_to(REPO).as_posix(), t) for m, (p, t) in MODULES.items()}
    _fail(handler_name_breaks(IMPORTS, modules, HANDLERS),
          "job handlers named outside portal/jobs/kinds.py")


#: Known breaks of the handler-module rule, each with what would end it. The lead shrinks this
#: list; an entry that no longer happens is reported as a warning.
_MOVE_DIFF = ("reuses the validation handler's file diff (_diff, _manifest_sha); move them to a "
              "module of portal/datasets that the handler imports too")
HANDLER_MODULE_ALLOWANCE = {
    ("portal.datasets.services", "portal.datasets.jobs"): _MOVE_DIFF,
    ("portal.datasets.views", "portal.datasets.jobs"): _MOVE_DIFF,
}


def test_handler_modules_are_imported_only_by_handler_modules():
    _fail_beyond(handler_module_breaks(IMPORTS, HANDLER_MODULES), HANDLER_MODULE_ALLOWANCE,
                 "web-side modules importing a job handler module")


def test_audit_imports_no_app_but_accounts():
    _fail(audit_breaks(IMPORTS), "portal.audit imports an app other than accounts")


#: What tests/unit loads at import time: it must run where Django is not installed (make unit,
#: tests/integration/test_science_fresh_venv.py).
UNIT_TEST_FILES = ("tests/__init__.py", "tests/conftest.py", "tests/helpers.py",
                   "tests/real_eeg.py", "tests/unit", "fixtures")
WEB_SIDE = ("django", "celery", "pytest_django", "portal", "rest_framework")


def unit_test_breaks():
    broken = []
    for name in UNIT_TEST_FILES:
        path = REPO / name
        for file in ([path] if path.is_file() else sorted(path.rglob("*.py"))):
            rel = file.relative_to(REPO)
            module = ".".join(rel.with_suffix("").parts)
            _, _, found = _scan_source(module, rel.as_posix(), file.read_text(encoding="utf-8"),
                                       file.name == "__init__.py")
            broken += [i.where() for i in found if not i.in_function
                       and any(_under(t, web) for t in i.targets for web in WEB_SIDE)]
    return broken


def test_unit_tests_and_their_fixtures_load_no_web_side_at_import():
    """tests/unit, the shared conftest and helpers and fixtures/ import Django, Celery or the
    portal only inside a fixture or test (which then checks that pytest-django runs)."""
    assert any(p.name == "conftest.py" for p in (REPO / "tests").iterdir())
    _fail(unit_test_breaks(), "top-level imports of the web side where tests/unit loads them")


def _project(target):
    return any(_under(target, top) for top in (*SCANNED, "fixtures"))


def test_count_imports_inside_functions():
    """Not a rule: prints how many import statements sit inside functions, per package, and
    how many of them load the project's own modules (cycles dodged) rather than a library
    (loaded lazily on purpose, to keep web processes light)."""
    total, own = Counter(), Counter()
    for i in IMPORTS:
        if not i.in_function:
            continue
        package = ".".join(i.module.split(".")[:2])
        total[package] += 1
        if _project(i.source):
            own[package] += 1
    assert sum(total.values()) == sum(1 for i in IMPORTS if i.in_function)
    print(f"\nimports inside functions: {sum(total.values())} "
          f"({sum(own.values())} of the project's own modules)")
    for package in sorted(total):
        print(f"  {package:32} {total[package]:4} ({own[package]} own)")
