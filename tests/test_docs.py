"""The README and the code agree: every rule is in the README's table with its family,
severity and fix kind; the two first commands are the ones this project documents."""
import re
from pathlib import Path

from nanproof.registry import all_rules

README = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
ROW = re.compile(r"^\| `([a-z0-9-]+)` \| (\w+) \| ([a-z /]+) \| (\w+) \|", re.M)


def test_readme_rule_table_matches_the_registry():
    table = {m.group(1): m.groups()[1:] for m in ROW.finditer(README)}
    rules = {r.id: r for r in all_rules()}
    assert set(table) == set(rules)
    for rid, (family, severity, fix) in table.items():
        r = rules[rid]
        assert family == r.family, rid
        assert r.severity in severity.split(" / "), rid
        assert fix == (r.fix or "suggestion"), rid


def test_readme_first_commands_scan_the_demo_and_run_the_tests():
    commands = re.findall(r"```sh\n(.*?)\n```", README, re.S)[:2]
    assert "nanproof scan fixtures/auklet_survey" in commands[0]
    assert "pytest" in commands[1]
    assert (Path(__file__).resolve().parents[1] / "fixtures" / "auklet_survey").is_dir()


def test_readme_states_the_results_warning_of_fix():
    from nanproof.fix import WARNING

    flat = " ".join(README.replace("**", "").split())
    assert " ".join(WARNING.split()) in flat


def test_the_wheel_ships_every_rule_page(tmp_path):
    import subprocess
    import sys
    import zipfile

    root = Path(__file__).resolve().parents[1]
    subprocess.run([sys.executable, "-m", "pip", "wheel", "-q", "--no-deps", "-w", str(tmp_path), str(root)], check=True, capture_output=True, timeout=600)
    (wheel,) = tmp_path.glob("nanproof-*.whl")
    names = zipfile.ZipFile(wheel).namelist()
    shipped = {n.rsplit("/", 1)[1][:-3] for n in names if n.startswith("nanproof/pages/") and n.endswith(".md")}
    assert shipped == {r.id for r in all_rules()}


def test_the_demo_tree_shows_every_family_and_its_stable_file_is_clean():
    from nanproof.api import scan
    from nanproof.config import Config
    from nanproof.registry import get

    demo = Path(__file__).resolve().parents[1] / "fixtures" / "auklet_survey"
    result = scan([str(demo)], Config(jobs=1))
    assert {get(f.rule).family for f in result.findings} == {"softmax", "loss", "elementary", "statistics", "api"}
    assert not [f for f in result.findings if f.path.endswith("stable.py")]
    assert result.problems == ()
