"""The README's configuration table names every CAIRN_* variable that is read anywhere: the
portal, the science, the CI scripts, the Makefile, docker-compose.yml, the Dockerfile, the
benchmarks and the tests."""

import re
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
READ_IN = ("portal", "cairn_science", ".ci", "bench", "tests", "fixtures", "Makefile",
           "docker-compose.yml", "Dockerfile", "manage.py")
NAME = re.compile(r"\bCAIRN_[A-Z0-9_]*[A-Z0-9]\b")


def _files():
    for name in READ_IN:
        path = REPO / name
        if path.is_file():
            yield path
        elif path.is_dir():
            for found in sorted(path.rglob("*")):
                if found.is_file() and found.suffix in ("", ".py", ".sh", ".yml", ".yaml",
                                                        ".toml", ".cfg", ".txt"):
                    yield found


def _read_in_code():
    names = {}
    for path in _files():
        if path == Path(__file__).resolve():
            continue
        for name in NAME.findall(path.read_text(encoding="utf-8", errors="replace")):
            names.setdefault(name, path.relative_to(REPO).as_posix())
    return names


def _table():
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    start = readme.index("\n## Configuration\n")
    end = readme.index("\n## ", start + 1)
    names = set()
    for line in readme[start:end].splitlines():
        if line.startswith("| `"):
            first = line.split("|")[1]
            names.update(NAME.findall(first))
    return names


def test_every_cairn_variable_has_a_row():
    read = _read_in_code()
    assert len(read) >= 20, "the scan should find the settings' variables"
    missing = sorted(f"{name} (read in {where})" for name, where in read.items()
                     if name not in _table())
    assert not missing, "add these to README.md's configuration table: " + ", ".join(missing)


def test_the_table_names_no_variable_nothing_reads():
    gone = sorted(_table() - set(_read_in_code()))
    assert not gone, f"README.md's configuration table names variables nothing reads: {gone}"
