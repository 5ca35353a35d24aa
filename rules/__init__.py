"""trimtab's built-in rules. They register through the ``trimtab`` entry-point group, exactly as a
third-party plugin does, so they use nothing but the public API."""
from trimtab import hookimpl

from . import bat, compose, exe, length, reward, secrets, smp, vocab, yml

MODULES = (yml, vocab, bat, smp, length, reward, exe, secrets, compose)


@hookimpl
def trimtab_rules():
    return [r for m in MODULES for r in m.RULES]
