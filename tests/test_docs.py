"""The documentation matches the behaviour: README and example suites parse and validate."""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

import pytest

from harness.suite import load_suite, parse_suite

ROOT = Path(__file__).resolve().parent.parent


def test_readme_suite_example_is_a_valid_suite() -> None:
    text = (ROOT / "README.md").read_text()
    (block,) = re.findall(r"```toml\n(.*?)```", text, re.S)
    suite = parse_suite(tomllib.loads(block), "README")
    # 24 permutations (the two specs among them), two tilings, pads 1 and 8 (pad 0 is var.z.y.x again)
    assert len(suite.layouts) == 24 + 2 + 2
    assert suite.kernel_options == (("varcoef", (("width", 64),)), ("lam_hyperdiffusion", (("halo", 3),)))
    assert suite.conversions_auto == 2


@pytest.mark.parametrize("path", sorted((ROOT / "docs" / "suites").glob("*.toml")) + ["default", "smoke"])
def test_shipped_suites_load(path: Path | str) -> None:
    suite = load_suite(str(path))
    assert suite.layouts and suite.kernels and suite.sizes


@pytest.mark.parametrize("args", [[], ["only-one"], ["--stored", "smoke"]])
def test_ci_gate_script_refuses_a_wrong_argument_count(args: list[str]) -> None:
    import subprocess

    proc = subprocess.run(["sh", str(ROOT / "docs" / "ci-gate.sh"), *args], capture_output=True, text=True)
    assert proc.returncode == 2 and proc.stderr.startswith("usage:")
