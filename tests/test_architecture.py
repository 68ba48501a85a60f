"""The package's house rules that a reading of the code can check (DEVELOPERS.md, 'Settings' and 'Layout').

The reference is the source itself, read with Python's own parser (ast), not a project helper.
"""

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "pipeline"
MODULES = sorted(p for p in PACKAGE.rglob("*.py") if "__pycache__" not in p.parts)


def _imports(path: Path) -> set[str]:
    names = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.module:
            names.add(node.module)
        elif isinstance(node, ast.Import):
            names.update(a.name for a in node.names)
    return names


def test_the_package_has_modules_to_check():
    assert len(MODULES) > 40


def test_no_module_outside_the_workflow_imports_from_it():
    offenders = [str(p.relative_to(PACKAGE)) for p in MODULES if "workflow" not in p.parts
                 and any(n == "pipeline.workflow" or n.startswith("pipeline.workflow.") for n in _imports(p))]
    assert offenders == []


def test_no_workflow_module_imports_another_step():
    steps = [p for p in MODULES if p.parent.name == "workflow" and p.stem not in ("__init__", "common")]
    assert len(steps) >= 10
    for path in steps:
        others = {n for n in _imports(path) if n.startswith("pipeline.workflow.") and n != "pipeline.workflow.common"}
        assert others == set(), path.name


def test_only_settings_and_the_workflow_read_a_config_mapping():
    # a parameter or variable named 'config' (the raw campaign mapping) lives in settings.py and workflow/ only
    offenders = []
    for path in MODULES:
        if path.name == "settings.py" or "workflow" in path.parts:
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.arg) and node.arg == "config":
                offenders.append(f"{path.relative_to(PACKAGE)}: argument 'config'")
            if isinstance(node, ast.Name) and node.id == "config":
                offenders.append(f"{path.relative_to(PACKAGE)}:{node.lineno} name 'config'")
    assert offenders == []


def test_private_header_cards_are_named_in_one_module():
    offenders = []
    for path in MODULES:
        if path.name == "cards.py":
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Constant) and isinstance(node.value, str) and node.value.startswith("GL") \
                    and node.value[2:].isalnum() and node.value.isupper():
                offenders.append(f"{path.relative_to(PACKAGE)}:{node.lineno} {node.value}")
    assert offenders == []


def test_every_error_and_warning_class_lives_in_errors_py():
    offenders = []
    for path in MODULES:
        if path.name == "errors.py":
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ClassDef) and node.name.endswith(("Error", "Warning")):
                offenders.append(f"{path.relative_to(PACKAGE)}: {node.name}")
    assert offenders == []


def test_every_module_declares_its_public_names():
    missing = [str(p.relative_to(PACKAGE)) for p in MODULES
               if p.name != "__init__.py" and "__all__" not in p.read_text(encoding="utf-8")]
    assert missing == []
