"""The documentation keeps up with the code."""

import argparse
from pathlib import Path

from driftloop.cli import build_parser
from driftloop.config import Config, QCConfig, ReadConfig

DOCS = Path(__file__).resolve().parent.parent / "docs"


def _options(parser):
    for action in parser._actions:
        yield from (s for s in action.option_strings if s.startswith("--"))
        if isinstance(action, argparse._SubParsersAction):
            for sub in action.choices.values():
                yield from _options(sub)


def test_every_cli_option_is_documented():
    text = (DOCS / "cli.md").read_text()
    missing = sorted({o for o in _options(build_parser()) if o not in text} - {"--help"})
    assert not missing, f"docs/cli.md lacks {missing}"


def test_every_qc_parameter_is_documented():
    text = (DOCS / "qc.md").read_text()
    missing = [name for name in QCConfig.__dataclass_fields__ if name not in text]
    assert not missing, f"docs/qc.md lacks {missing}"


def test_every_read_option_is_documented():
    text = (DOCS / "input-formats.md").read_text()
    missing = [name for name in ReadConfig.__dataclass_fields__ if name not in text]
    assert not missing, f"docs/input-formats.md lacks {missing}"


def test_configuration_page_lists_every_section_and_key():
    text = (DOCS / "configuration.md").read_text()
    for section, spec in Config.__dataclass_fields__.items():
        assert f"[{section}]" in text, section
        fields = spec.default_factory().__dataclass_fields__
        missing = [name for name in fields if f"`{name}`" not in text]
        assert not missing, f"docs/configuration.md [{section}] lacks {missing}"


def test_every_reason_code_is_documented():
    from driftloop.qc import REASONS

    text = (DOCS / "qc.md").read_text()
    missing = [code for code in REASONS if f"`{code}`" not in text]
    assert not missing, f"docs/qc.md lacks {missing}"
