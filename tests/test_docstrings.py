"""Every public function, class and method of the library has a docstring (house rule: numpydoc docstrings).

Public means: in a module whose name does not start with ``_`` (the command line, ``finitekey.cli``, is
excluded: its modules are not an API), listed in ``__all__`` (or, without ``__all__``, not starting with
``_``), defined in that module.  Common practice, no source.
"""

import importlib
import inspect
import pkgutil

import finitekey


def _public_modules():
    for info in pkgutil.walk_packages(finitekey.__path__, "finitekey."):
        parts = info.name.split(".")
        if any(p.startswith("_") for p in parts[1:]) or parts[1] == "cli":
            continue
        yield importlib.import_module(info.name)


def _undocumented():
    out = []
    for mod in _public_modules():
        names = getattr(mod, "__all__", None) or [n for n in dir(mod) if not n.startswith("_")]
        for name in names:
            obj = getattr(mod, name, None)
            if getattr(obj, "__module__", None) != mod.__name__:
                continue
            if inspect.isfunction(obj) and not inspect.getdoc(obj):
                out.append(f"{mod.__name__}.{name}")
            if inspect.isclass(obj):
                if not inspect.getdoc(obj):
                    out.append(f"{mod.__name__}.{name}")
                for attr, member in vars(obj).items():
                    raw = member.__func__ if isinstance(member, (staticmethod, classmethod)) else member
                    if not attr.startswith("_") and inspect.isfunction(raw) and not inspect.getdoc(getattr(obj, attr)):
                        out.append(f"{mod.__name__}.{name}.{attr}")
    return out


def test_every_public_function_and_method_has_a_docstring():
    assert _undocumented() == []


def test_the_check_sees_the_package():
    # guard against a walk that finds nothing (a test that could not fail)
    names = {m.__name__ for m in _public_modules()}
    assert {"finitekey.budget", "finitekey.protocols.bb84", "finitekey.report.sweep"} <= names
