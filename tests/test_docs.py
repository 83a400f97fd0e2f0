"""The generated key reference stays in step with the schema."""

from pathlib import Path

from shellmodes.case.keys import case_keys_markdown

ROOT = Path(__file__).resolve().parent.parent


def test_case_keys_document_is_current():
    committed = (ROOT / "docs" / "CASE_KEYS.md").read_text()
    hint = "regenerate with: shellmodes keys > docs/CASE_KEYS.md"
    assert committed.rstrip("\n") == case_keys_markdown().rstrip("\n"), hint


def test_readme_names_the_commands_ci_runs():
    readme = (ROOT / "README.md").read_text()
    assert "python3 -m pytest -q" in readme
    assert "shellmodes run cases/unit-sphere.toml" in readme
    assert (ROOT / "cases" / "unit-sphere.toml").is_file()
