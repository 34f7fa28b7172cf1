"""README.md cannot drift from the code: its walkthrough runs, its set-up commands are CI's.

The walkthrough is the single ``python`` block of the "Walkthrough" section, executed as it
stands in a temporary working folder. The two set-up commands are the ``bash`` block of the
"Set-up" section; ``.ci/run`` marks the line that runs each with a comment
``# README, set-up command N`` (the ``pip install`` line below it), and must run the same commands, up to options that only CI
adds (quiet output, a temporary report folder).
"""

import contextlib
import io
import re
import shlex
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text()
CI_RUN = (ROOT / ".ci" / "run").read_text()

# Options CI adds to the README's commands, with the number of values each takes.
CI_ONLY_OPTIONS = {"--quiet": 0, "--report": 1}


def section(text: str, title: str) -> str:
    """The body of the Markdown section ``## title`` (up to the next ``## `` heading)."""
    match = re.search(rf"^## {re.escape(title)}\s*$(.*?)(?=^## |\Z)", text, flags=re.M | re.S)
    assert match, f"README.md has no section '## {title}'"
    return match.group(1)


def code_blocks(text: str, language: str) -> list[str]:
    return re.findall(rf"^```{language}\n(.*?)^```", text, flags=re.M | re.S)


def commands(line: str) -> list[list[str]]:
    """A shell line ``a && b`` as the token lists of its simple commands."""
    return [shlex.split(part) for part in line.split("&&")]


def without_ci_options(tokens: list[str]) -> list[str]:
    out, skip = [], 0
    for token in tokens:
        if skip:
            skip -= 1
        elif token in CI_ONLY_OPTIONS:
            skip = CI_ONLY_OPTIONS[token]
        else:
            out.append(token)
    return out


def readme_setup_commands() -> list[str]:
    blocks = code_blocks(section(README, "Set-up (fresh machine, Python >= 3.11)"), "bash")
    assert len(blocks) == 1, "the Set-up section must hold one bash block"
    return [line.strip() for line in blocks[0].splitlines() if line.strip()]


def ci_setup_commands() -> list[str]:
    """The line starting with ``pip install`` in each block of .ci/run after a set-up marker."""
    blocks = re.split(r"^\s*# README, set-up command (\d+).*$", CI_RUN, flags=re.M)
    numbers = [int(n) for n in blocks[1::2]]
    assert numbers == [1, 2], f".ci/run marks set-up commands {numbers}, expected 1 and 2"
    found = []
    for number, body in zip(numbers, blocks[2::2]):
        lines = [line.strip() for line in body.splitlines() if line.strip().startswith("pip install")]
        assert len(lines) == 1, f".ci/run, set-up command {number}: expected one 'pip install' line, found {lines}"
        found.append(lines[0])
    return found


def test_readme_setup_commands_are_the_ones_ci_runs():
    readme = readme_setup_commands()
    assert readme == ['pip install . && smle demo', 'pip install ".[test]" && pytest -q -n 2']  # the two README promises
    ci = ci_setup_commands()
    for number, (documented, run) in enumerate(zip(readme, ci), start=1):
        assert [without_ci_options(c) for c in commands(run)] == commands(documented), \
            f"set-up command {number}: README says {documented!r}, .ci/run runs {run!r}"


def test_drift_between_readme_and_ci_is_caught():
    # The comparison itself: an editable install or a dropped test command is a difference.
    documented = 'pip install ".[test]" && pytest -q -n 2'
    assert [without_ci_options(c) for c in commands('pip install --quiet ".[test]" && pytest -q -n 2')] == commands(documented)
    assert [without_ci_options(c) for c in commands('pip install --quiet -e ".[test]" && pytest -q -n 2')] != commands(documented)
    assert [without_ci_options(c) for c in commands('pip install --quiet ".[test]"')] != commands(documented)


def test_readme_walkthrough_runs(tmp_path, monkeypatch):
    blocks = code_blocks(section(README, "Walkthrough"), "python")
    assert len(blocks) == 1, "the Walkthrough section must hold one python block"
    monkeypatch.chdir(tmp_path)
    namespace: dict = {"__name__": "readme_walkthrough"}
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        exec(compile(blocks[0], "README.md (Walkthrough)", "exec"), namespace)
    from smle.results import CAUTION

    sv, rsv, demo, y = namespace["sv"], namespace["rsv"], namespace["demo"], namespace["y"]
    assert sv.converged and rsv.converged, (sv.message, rsv.message)
    assert printed.getvalue().count(CAUTION) == 2  # each printed summary carries the caution
    assert (tmp_path / "factor.png").stat().st_size > 0
    assert all(path.exists() and tmp_path in path.resolve().parents for path in map(Path, demo.files.values()))
    # The returns the walkthrough fits are the percent log changes of the demo's daily closes,
    # computed here with NumPy alone from the daily bars (the first day gives the first close).
    closes = demo.daily["close"].to_numpy()
    np.testing.assert_allclose(y, 100 * np.diff(np.log(closes)), atol=1e-6)
    assert sv.n_obs == rsv.n_obs == len(y) == 500

