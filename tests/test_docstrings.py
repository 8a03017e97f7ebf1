"""Every parameter of every public function and method is documented in its docstring.

The practice followed: the test suite parses every public docstring and fails on an
undocumented argument, so that the reference text cannot fall behind the signatures.

Public is every name in a module's ``__all__``; for a class, each method defined in its
body whose name does not start with ``_``, and its constructor (an explicit ``__init__``
or the dataclass fields), which the class docstring covers. A parameter is documented when
it starts an entry of the numpydoc ``Parameters`` section (``name``, ``name : type`` or
``a, b``; in a class docstring also ``Attributes``), or, in a docstring of one paragraph
(a small helper's), when it stands in double backticks. ``self``, ``cls`` and names
starting with ``_`` are exempt; a public method without a docstring is a gap too.
"""

from __future__ import annotations

import dataclasses
import importlib
import inspect
import pkgutil
import re

import amploop

_SECTIONS = ("Parameters", "Attributes")
_UNDERLINE = re.compile(r"^-{3,}$")


def _public_objects() -> list[tuple[str, str, object]]:
    """(module, name, object) for each function and class in an ``__all__``, once each."""
    seen: set[tuple[str, str]] = set()
    found = []
    modules = [amploop.__name__] + [
        info.name for info in pkgutil.walk_packages(amploop.__path__, "amploop.")
    ]
    for module_name in modules:
        module = importlib.import_module(module_name)
        for name in getattr(module, "__all__", ()):
            obj = getattr(module, name)
            if not (inspect.isfunction(obj) or inspect.isclass(obj)):
                continue
            home = getattr(obj, "__module__", "")
            key = (home, obj.__qualname__)
            if not home.startswith("amploop") or key in seen:
                continue
            seen.add(key)
            found.append((home, obj.__qualname__, obj))
    return found


def _entries(doc: str, sections: tuple[str, ...]) -> set[str]:
    """Names that start an entry of the given numpydoc sections of ``doc``."""
    lines = inspect.cleandoc(doc).splitlines()
    names: set[str] = set()
    inside = False
    for i, line in enumerate(lines):
        following = lines[i + 1].strip() if i + 1 < len(lines) else ""
        if line.strip() and _UNDERLINE.match(following):
            inside = line.strip() in sections
            continue
        if not inside or not line.strip() or line.startswith(" ") or _UNDERLINE.match(line):
            continue
        head = line.split(" : ", 1)[0].strip()
        names.update(part.strip().lstrip("*") for part in head.split(","))
    return names


def _undocumented(doc: str | None, params: list[str], sections: tuple[str, ...]) -> list[str]:
    """The names in ``params`` that ``doc`` does not document."""
    if not doc:
        return list(params)
    documented = _entries(doc, sections)
    one_paragraph = "\n\n" not in inspect.cleandoc(doc)
    return [
        p for p in params
        if p not in documented and not (one_paragraph and f"``{p}``" in doc)
    ]


def _parameters(function) -> list[str]:
    """The parameters of ``function`` that need documenting."""
    return [
        name for name in inspect.signature(function).parameters
        if name not in ("self", "cls") and not name.startswith("_")
    ]


def _methods(cls) -> list[tuple[str, object]]:
    """(name, function) of each public method defined in the body of ``cls``."""
    methods = []
    for name, member in vars(cls).items():
        function = member.__func__ if isinstance(member, (staticmethod, classmethod)) else member
        if not name.startswith("_") and inspect.isfunction(function):
            methods.append((name, function))
    return methods


def _constructor_parameters(cls) -> list[str]:
    """What the class docstring of ``cls`` must cover: its ``__init__``'s parameters."""
    if "__init__" in vars(cls):  # written in the class, or by @dataclass
        return _parameters(cls.__init__)
    if dataclasses.is_dataclass(cls):
        return [f.name for f in dataclasses.fields(cls) if f.init]
    return []


def _gaps() -> list[str]:
    """One line per undocumented parameter or missing method docstring."""
    gaps = []
    for module, qualname, obj in _public_objects():
        if inspect.isfunction(obj):
            checked = [(qualname, obj.__doc__, _parameters(obj), ("Parameters",))]
        else:
            checked = [(qualname, obj.__doc__, _constructor_parameters(obj), _SECTIONS)]
            for name, method in _methods(obj):
                where = f"{qualname}.{name}"
                if not method.__doc__:
                    gaps.append(f"{module}: {where}: (no docstring)")
                else:
                    checked.append((where, method.__doc__, _parameters(method), ("Parameters",)))
        gaps.extend(f"{module}: {where}: {p}" for where, doc, params, sections in checked
                    for p in _undocumented(doc, params, sections))
    return gaps


def test_every_public_parameter_is_documented():
    gaps = _gaps()
    assert not gaps, f"{len(gaps)} undocumented:\n" + "\n".join(gaps)
