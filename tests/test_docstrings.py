"""Every public function and class of the library has a docstring; numerical functions document parameters."""

import importlib
import inspect
import pkgutil

import compensator


def public_members():
    for info in pkgutil.walk_packages(compensator.__path__, "compensator."):
        if any(part.startswith("_") for part in info.name.split(".")[1:]) or info.name.startswith("compensator.cli"):
            continue
        module = importlib.import_module(info.name)
        for name, obj in vars(module).items():
            if name.startswith("_") or getattr(obj, "__module__", None) != module.__name__:
                continue
            if inspect.isfunction(obj) or inspect.isclass(obj):
                yield f"{module.__name__}.{name}", obj


def test_public_objects_have_docstrings():
    missing = [name for name, obj in public_members() if not inspect.getdoc(obj)]
    assert not missing, f"public objects without a docstring: {missing}"


def test_multi_argument_functions_document_parameters():
    lacking = []
    for name, obj in public_members():
        if not inspect.isfunction(obj):
            continue
        params = [p for p in inspect.signature(obj).parameters if p not in ("self", "cls")]
        doc = inspect.getdoc(obj) or ""
        if len(params) >= 3 and "Parameters" not in doc:
            lacking.append(name)
    assert not lacking, f"functions of three or more arguments without a numpydoc Parameters section: {lacking}"
