"""The README's two commands stay true: CI runs the test command verbatim."""

from __future__ import annotations

import re

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
