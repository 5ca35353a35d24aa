"""trimtab: a static checker for reinforcement-learning fine-tuning run configurations.

The plugin API is importable from here: ``hookimpl``, ``Rule``, ``rule``, ``Context``,
``collect``, ``Concept``, ``Finding``, ``Level``, ``Location``, ``RunModel``, ``Document``. Imports are lazy so that
start-up stays fast.
"""
__version__ = "0.1.0"

_EXPORTS = {
    "hookimpl": "engine.registry", "Rule": "engine.registry", "rule": "engine.registry", "Context": "engine.registry", "collect": "engine.registry",
    "Concept": "common.vocabulary",
    "Finding": "common.findings", "Level": "common.findings", "Location": "common.findings", "Edit": "common.findings",
    "RunModel": "resolve.model", "Value": "resolve.model", "Component": "resolve.model",
    "Document": "load.document", "Scalar": "load.document", "Mapping": "load.document", "Sequence": "load.document",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'trimtab' has no attribute {name!r}")
    import importlib

    return getattr(importlib.import_module(f".{module}", __name__), name)
