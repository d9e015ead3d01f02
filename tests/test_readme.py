"""The README's two commands stay true: CI runs the test command verbatim, and the demo
run writes to a folder git ignores (not over the committed demo reports)."""

from __future__ import annotations

import re
import shlex
import subprocess

from tests.helpers import ROOT


def commands() -> list[str]:
    text = (ROOT / "README.md").read_text()
    return re.findall(r"```bash\n(.+?)\n```", text)


def test_ci_runs_the_readme_test_command() -> None:
    install_and_demo, install_and_test = commands()[:2]
    assert "octrial run designs/" in install_and_demo
    assert "pytest" in install_and_test
    assert install_and_test in (ROOT / ".ci" / "run").read_text().splitlines()


def test_readme_demo_design_exists() -> None:
    demo = re.search(r"octrial run (\S+)", commands()[0]).group(1)
    assert (ROOT / demo).is_file()


def test_readme_demo_run_writes_to_an_ignored_folder() -> None:
    """Issue 12: the first command must not rewrite a committed file under reports/. Its
    output folder (--out) is outside reports/ and ignored by git (``git check-ignore``,
    run on the repository itself), so a fresh clone stays clean after the demo."""
    words = shlex.split(commands()[0].split("&&")[-1])
    assert words[:2] == ["octrial", "run"] and "--out" in words
    out = words[words.index("--out") + 1]
    assert not out.startswith("reports")
    ignored = subprocess.run(["git", "check-ignore", "-q", f"{out}/oc.csv"], cwd=ROOT,
                             check=False)
    if ignored.returncode == 128:  # not a git checkout (an unpacked archive): nothing to dirty
        return
    assert ignored.returncode == 0, f"{out}/ is not ignored by git"
