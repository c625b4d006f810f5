"""The README's commands work as written (its workflow blocks run in a fresh folder)."""

import re
import shlex
from pathlib import Path

import pytest

from dustrt.cli import main

REPO = Path(__file__).resolve().parents[1]


def readme_commands() -> list[str]:
    text = (REPO / "README.md").read_text()
    lines = []
    for block in re.findall(r"```bash\n(.*?)```", text, flags=re.S):
        for line in block.splitlines():
            part = line.split("&&")[-1].strip()
            if part.startswith("dustrt "):
                lines.append(part)
    return lines


def test_readme_has_the_quick_start_and_the_three_jobs():
    cmds = readme_commands()
    assert cmds[0] == "dustrt demo -o demo"
    for job in ("dustrt limb ", "dustrt limit ", "dustrt sweep "):
        assert any(c.startswith(job) for c in cmds), job


@pytest.mark.slow
def test_readme_workflows_run(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "configs").symlink_to(REPO / "configs")
    for cmd in readme_commands():
        if cmd.startswith("dustrt demo"):
            continue  # tests/test_demo.py runs the demo
        args = shlex.split(cmd)[1:] + ["-q"]
        assert main(args) == 0, cmd
        out = args[args.index("-o") + 1]
        assert (tmp_path / out).is_file(), cmd
