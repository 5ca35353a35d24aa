"""trimtab's built-in rules. They register through the ``trimtab`` entry-point group, exactly as a
third-party plugin does, so they use nothing but the public API. Each area's rules live in one
module; ``collect`` finds every rule written in them (no hand-kept list)."""
from trimtab import collect, hookimpl


@hookimpl
def trimtab_rules():
    return collect(__name__)
