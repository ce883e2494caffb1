"""docs/study-files.md is generated from the schema and must match it."""

from pathlib import Path

from landflow.study.config import SECTIONS
from landflow.study.reference import COMMAND, render, toml_value
from landflow.study.schema import REQUIRED
from landflow.study.steps import ANALYSES

DOC = Path(__file__).resolve().parents[2] / "docs" / "study-files.md"


def test_committed_reference_is_up_to_date():
    assert DOC.read_text(encoding="utf-8") == render(), (
        f"docs/study-files.md is out of date with the schema; regenerate it with: {COMMAND}")


def test_every_key_with_its_default_and_unit_is_documented():
    text = render()
    tables = [(name, s) for name, s in SECTIONS.items()] + [(f"analyses.{a}", st.SETTINGS) for a, st in ANALYSES.items()]
    for table, section in tables:
        assert f"[{table}]" in text
        for name, key in section.keys.items():
            row = next((line for line in text.splitlines() if line.startswith(f"| `{name}` |")), None)
            assert row is not None, f"{table}.{name} missing"
            if key.default not in (None, REQUIRED):
                assert f"`{toml_value(key.default)}`" in text
            if key.unit:
                assert key.unit in text
    for name, step in ANALYSES.items():
        first = "[network]" if getattr(step, "NETWORK_ONLY", None) else "[landscape]"
        assert f"```toml\n{first}" in text and f"\n[analyses.{name}]\n" in text


def test_every_analysis_example_validates(tmp_path):
    import re
    import tomllib

    from landflow.study.schema import validate_section

    for name, step in ANALYSES.items():
        block = re.search(rf"```toml\n(\[(?:landscape|network)\][^`]*?\n\[analyses\.{name}\]\n[^`]*?)```",
                          render()).group(1)
        table = tomllib.loads(block)["analyses"][name]
        for value in table.values():     # named input files must exist for the path check
            if isinstance(value, str) and "." in value:
                (tmp_path / value).touch()
        validate_section(table, step.SETTINGS, f"analyses.{name}", tmp_path, "example")


def test_regional_example_validates(tmp_path):
    import re
    import tomllib

    from landflow.regional import NAME, SETTINGS
    from landflow.study.schema import validate_section

    block = re.search(rf"```toml\n(\[landscape\][^`]*?\n\[analyses\.{NAME}\]\n[^`]*?)```", render()).group(1)
    validate_section(tomllib.loads(block)["analyses"][NAME], SETTINGS, f"analyses.{NAME}", tmp_path, "example")
