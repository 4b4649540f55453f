"""Old spellings of renamed public names, kept working with a DeprecationWarning.

The glossary in DEVELOPERS.md fixes one name per concept. A user's script written against an
older spelling keeps running: each helper here forwards the old name to the new one and warns
once per call site (Python's default warning filter), naming both spellings so that the fix is
a search and replace.
"""

from __future__ import annotations

import functools
import warnings

__all__ = ["renamed_keywords", "renamed_function", "renamed_attribute", "renamed_fields",
           "module_aliases", "warn_renamed"]


def warn_renamed(where: str, old: str, new: str, stacklevel: int = 3) -> None:
    """Warn that ``old`` is the deprecated spelling of ``new`` (``where``: the owner's name)."""
    warnings.warn(f"{where}: {old!r} is a deprecated name; use {new!r}", DeprecationWarning,
                  stacklevel=stacklevel)


def renamed_keywords(_owner=None, **old_to_new):
    """Decorator: accept each old keyword spelling, warn, and pass the value on under its new name.

    Giving both the old and the new spelling is a TypeError (the two could disagree). The
    messages name ``_owner``, by default the decorated function.
    """
    def decorate(function):
        owner = _owner or function.__name__

        @functools.wraps(function)
        def accept_old_spellings(*args, **kwargs):
            for old, new in old_to_new.items():
                if old in kwargs:
                    if new in kwargs:
                        raise TypeError(f"{owner}: give {new}= or its deprecated spelling "
                                        f"{old}=, not both")
                    warn_renamed(owner, old, new)
                    kwargs[new] = kwargs.pop(old)
            return function(*args, **kwargs)
        return accept_old_spellings
    return decorate


def renamed_fields(**old_to_new):
    """Class decorator for a dataclass whose fields were renamed: the constructor accepts the
    old keywords and each old name reads as a property, both with a warning."""
    def decorate(cls):
        cls.__init__ = renamed_keywords(cls.__name__, **old_to_new)(cls.__init__)
        for old, new in old_to_new.items():
            setattr(cls, old, renamed_attribute(old, new))
        return cls
    return decorate


def renamed_function(old_name: str, function):
    """A function called ``old_name`` that warns and then calls ``function``."""
    @functools.wraps(function)
    def call_new_name(*args, **kwargs):
        warn_renamed(function.__module__, old_name, function.__name__)
        return function(*args, **kwargs)
    call_new_name.__name__ = call_new_name.__qualname__ = old_name
    call_new_name.__doc__ = f"Deprecated spelling of :func:`{function.__name__}`."
    return call_new_name


def renamed_attribute(old: str, new: str) -> property:
    """A read-only property ``old`` that warns and returns attribute ``new``."""
    def read(self):
        warn_renamed(type(self).__name__, old, new)
        return getattr(self, new)
    return property(read, doc=f"Deprecated spelling of ``{new}``.")


def module_aliases(module_name: str, aliases: dict):
    """A module ``__getattr__`` serving deprecated names: ``aliases`` maps old -> (new, value)."""
    def __getattr__(name):
        if name in aliases:
            new, value = aliases[name]
            warn_renamed(module_name, name, new)
            return value
        raise AttributeError(f"module {module_name!r} has no attribute {name!r}")
    return __getattr__
