"""The package layout is the data flow: stage subpackages import only from stages below
them, and no module outgrows one topic (~600 lines)."""

import ast
from pathlib import Path

import pandas as pd
import pytest

import pondsim

PACKAGE = Path(pondsim.__file__).parent

#: Stage of each top-level name under pondsim/, in the order of the data flow. A module
#: may import from its own stage and from stages with a lower number only.
STAGES = {
    "errors": 0, "glossary": 0,
    "scenario": 1,
    "forcing": 2,
    "pond": 3,
    "operations": 4,
    "results": 5,
    "studies": 6,
    "report": 7,
    "cli": 8, "__main__": 8, "__init__": 8, "benchmarks": 8,
}

#: Longest module allowed [lines]. No generated data tables live in the package.
MAX_LINES = 650


def _modules():
    return sorted(p for p in PACKAGE.rglob("*.py") if "__pycache__" not in p.parts)


def _stage_of_path(path: Path) -> str:
    rel = path.relative_to(PACKAGE)
    return rel.parts[0] if len(rel.parts) > 1 else rel.stem


def _imported_stages(path: Path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in ast.walk(tree):
        names = []
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names = [node.module]
            if node.module == "pondsim":
                names = [f"pondsim.{a.name}" for a in node.names]
        elif isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        for name in names:
            parts = name.split(".")
            if parts[0] == "pondsim" and len(parts) > 1:
                yield node.lineno, parts[1]


def test_every_top_level_name_has_a_stage():
    names = {_stage_of_path(p) for p in _modules()}
    assert names <= set(STAGES), f"no stage declared for {sorted(names - set(STAGES))}"


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_imports_run_down_the_pipeline(path):
    own = STAGES[_stage_of_path(path)]
    for line, target in _imported_stages(path):
        if target == "__version__":
            continue
        assert target in STAGES, f"{path.name}:{line} imports unknown pondsim.{target}"
        assert STAGES[target] <= own, (
            f"{path.relative_to(PACKAGE)}:{line} imports pondsim.{target} (stage "
            f"{STAGES[target]}) from stage {own}")


def test_no_relative_imports_hide_the_stage():
    for path in _modules():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        rel = [n.lineno for n in ast.walk(tree) if isinstance(n, ast.ImportFrom) and n.level]
        assert not rel, f"{path.relative_to(PACKAGE)} uses relative imports at lines {rel}"


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_modules_keep_to_one_topic(path):
    n = len(path.read_text(encoding="utf-8").splitlines())
    assert n <= MAX_LINES, f"{path.relative_to(PACKAGE)} has {n} lines (> {MAX_LINES})"


def test_read_weather_result_goes_straight_into_simulate():
    """The README's Python snippet: read_weather's table is what simulate(forcing=) takes."""
    repo = PACKAGE.parent
    scenario = pondsim.load_scenario(repo / "scenarios" / "kestrel_flats.toml")
    forcing = pondsim.read_weather(repo / "weather" / "kestrel_flats.epw")
    assert isinstance(forcing, pd.DataFrame) and forcing.attrs
    ds = pondsim.simulate(scenario, members=1, forcing=forcing)
    ref = pondsim.simulate(scenario, members=1)
    assert float(ds["harvested"].sum()) == pytest.approx(float(ref["harvested"].sum()),
                                                         rel=1e-12)
    water = pondsim.water_temperature(forcing, scenario.pond)
    assert len(water) == len(forcing)
