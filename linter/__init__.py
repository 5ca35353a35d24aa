"""trimtab: a static checker for reinforcement-learning fine-tuning run configurations.

The plugin API is importable from here: ``hookimpl``, ``Rule``, ``rule``, ``Context``,
``collect``, ``Concept``, ``Finding``, ``Level``, ``Location``, ``RunModel``, ``Document``. Imports are lazy so that
start-up stays fast.
"""
__version__ = "0.1.0"

_EXPORTS = {
    "hookimpl": "engine", "Rule": "engine", "rule": "engine", "Context": "engine", "collect": "engine",
    "Concept": "vocabulary",
    "Finding": "findings", "Level": "findings", "Location": "findings", "Edit": "findings",
    "RunModel": "model", "Value": "model", "Component": "model",
    "Document": "document", "Scalar": "document", "Mapping": "document", "Sequence": "document",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'trimtab' has no attribute {name!r}")
    import importlib

    return getattr(importlib.import_module(f".{module}", __name__), name)
