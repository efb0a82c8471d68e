"""The README's two set-up commands are the ones CI and the container image run, so a fresh
machine gets exactly what CI tested (install from the lock files, then the same steps)."""

from __future__ import annotations

import json
import re
import shlex
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def readme_commands() -> list[str]:
    """The README's first two ```bash blocks: the install-and-run command and the
    install-and-test command (the set-up commands that follow the opening paragraph)."""
    blocks = re.findall(r"```bash\n(.*?)```", (ROOT / "README.md").read_text(), flags=re.S)
    return [b.strip() for b in blocks[:2]]


def steps(command: str) -> list[str]:
    return [" ".join(shlex.split(part)) for part in command.split("&&")]


def test_readme_states_two_setup_commands_that_install_from_the_locks():
    cmds = readme_commands()
    run, test = cmds
    assert all("\n" not in c for c in cmds)
    assert steps(run)[0] == "pip install --require-hashes -r locks/runtime.txt"
    assert steps(run)[-1] == "python -m service"
    assert steps(test)[0] == "pip install --require-hashes -r locks/test.txt"
    assert steps(test)[-1] == "python -m pytest"
    for lock in ("locks/runtime.txt", "locks/test.txt"):
        text = (ROOT / lock).read_text()
        pins = [ln for ln in text.splitlines() if re.match(r"^[A-Za-z0-9_.\-]+==", ln)]
        assert pins, lock
        assert text.count("--hash=sha256:") >= len(pins)  # every pin carries its hashes
        assert "--extra-index-url" not in text and "--find-links" not in text  # no local paths


def test_ci_runs_exactly_the_readme_test_command_in_a_new_environment():
    script = (ROOT / ".ci" / "run").read_text()
    lines = [ln.strip() for ln in script.splitlines() if ln.strip() and not ln.startswith("#")]
    assert lines[-1] == readme_commands()[1]
    assert any(re.match(r"python3? -m venv ", ln) for ln in lines)
    assert any("mktemp -d" in ln for ln in lines)
    assert any(ln.startswith(". ") and "/bin/activate" in ln for ln in lines)


def test_dockerfile_runs_the_readme_install_and_run_steps_in_order():
    text = (ROOT / "Dockerfile").read_text().replace("\\\n", " ")
    runs: list[str] = []
    cmd = None
    for line in text.splitlines():
        line = line.strip()
        if line.startswith("RUN "):
            runs += steps(line[4:])
        elif line.startswith("CMD "):
            cmd = " ".join(json.loads(line[4:]))
    want = steps(readme_commands()[0])
    install, start = want[:-1], want[-1]
    positions = [runs.index(step) for step in install]  # ValueError names a missing step
    assert positions == sorted(positions)
    assert cmd == start
