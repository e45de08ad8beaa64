"""The README's promises: its two fresh-machine commands, CI running exactly the test one,
the caution for operational use, and the documented reason codes and exit codes."""
from __future__ import annotations

import re

from pipelines import schemas
from pipelines.errors import EXIT_CODES
from stages.time_scales import TimeScales
from tests.conftest import REPO

README = (REPO / "README.md").read_text()


def _commands() -> list[str]:
    return re.findall(r"```bash\n(.+?)\n```", README)


def test_first_lines_give_the_two_commands():
    head = README[: README.index("## How it runs")]
    cmds = _commands()[:2]
    assert all(c in head for c in cmds)
    assert "relcorr demo" in cmds[0] and "pip install -e ." in cmds[0]
    assert "pytest" in cmds[1] and "[test]" in cmds[1]


def test_ci_runs_exactly_the_readme_test_command():
    ci = (REPO / ".ci" / "run").read_text().splitlines()
    assert _commands()[1] in ci


def test_caution_for_operational_use():
    assert "not certified for operational navigation or timekeeping" in README


def test_every_reason_and_exit_code_is_documented():
    from pipelines.registry import discover

    stage_reasons = [r for cls in discover().values() for r in cls.quarantine_reasons]
    assert "eop_beyond_table" in TimeScales.quarantine_reasons
    for reason in list(schemas.INGEST_REASONS) + stage_reasons:
        assert f"`{reason}`" in README, reason
    for code in EXIT_CODES:
        assert f"| {code} |" in README, code
