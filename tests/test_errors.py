"""The project's error and warning classes live in pipeline/errors.py and subclass the fitting built-ins."""

import ast
from pathlib import Path

import pytest

import pipeline.errors as errors

PACKAGE = Path(errors.__file__).parent


@pytest.mark.parametrize("name", errors.__all__)
def test_every_class_has_the_right_bases(name):
    cls = getattr(errors, name)
    if issubclass(cls, Warning):
        assert issubclass(cls, errors.GasledgerWarning) and issubclass(cls, UserWarning)
    elif cls is errors.GasledgerError:
        assert issubclass(cls, Exception)
    elif cls is errors.GasledgerTypeError:
        # the wrong kind of object: a TypeError (Python's rule), never a ValueError
        assert issubclass(cls, errors.GasledgerError) and issubclass(cls, TypeError)
        assert not issubclass(cls, ValueError)
    else:
        # a bad value: a ValueError, so callers can catch either
        assert issubclass(cls, errors.GasledgerError) and issubclass(cls, ValueError)


def _exception_classes(path: Path) -> list[str]:
    """Names of the classes in ``path`` whose bases look like exceptions or warnings."""
    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ClassDef):
            bases = [ast.unparse(b) for b in node.bases]
            if any(b.endswith(("Error", "Warning", "Exception")) for b in bases):
                found.append(node.name)
    return found


def test_no_error_or_warning_class_outside_errors_py():
    outside = {str(p.relative_to(PACKAGE)): names for p in sorted(PACKAGE.rglob("*.py"))
               if p.name != "errors.py" and (names := _exception_classes(p))}
    assert outside == {}
    assert set(_exception_classes(PACKAGE / "errors.py")) == set(errors.__all__)
