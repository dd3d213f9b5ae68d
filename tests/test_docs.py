"""The README's quick start is what CI runs, and the documents name what exists."""

from __future__ import annotations

import re
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]


def _quick_start_commands() -> list[str]:
    text = (REPO / "README.md").read_text(encoding="utf-8")
    section = text.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    return [line.strip() for line in section.splitlines() if line.startswith("    ")]


def test_quick_start_has_exactly_two_commands():
    cmds = _quick_start_commands()
    assert len(cmds) == 2
    assert "refdb demo" in cmds[0] and "pytest" in cmds[1]


def test_ci_runs_the_readme_test_command_verbatim():
    ci = (REPO / ".ci" / "run").read_text(encoding="utf-8")
    assert _quick_start_commands()[1] in ci.splitlines()


def test_readme_opens_with_the_job_and_carries_the_caution():
    text = (REPO / "README.md").read_text(encoding="utf-8")
    first_para = text.split("\n\n")[1]
    assert "which crystalline phases" in first_para
    flat = " ".join(text.split())
    assert "accredited methods" in flat and "respirable crystalline silica" in flat


def test_no_machine_paths_in_repository_files():
    pattern = re.compile(r"(^|[\s'\"(=])/(work|farm|root|home)/")
    offenders = []
    for path in REPO.rglob("*"):
        if any(part in {".git", ".venv", "venv", "__pycache__", ".pytest_cache", ".hypothesis"} or part.endswith(".egg-info") for part in path.parts):
            continue
        if path.is_file() and path.suffix in {".py", ".md", ".toml", ".cif", ".xy", ".txt", ".csv", ".json", ""}:
            try:
                text = path.read_text(encoding="utf-8")
            except (UnicodeDecodeError, OSError):
                continue
            if pattern.search(text):
                offenders.append(str(path.relative_to(REPO)))
    assert offenders == []
