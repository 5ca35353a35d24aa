"""Settings: ``[tool.trimtab]`` in pyproject.toml or a ``trimtab.toml``, found by walking up
from the working directory, validated against the schema shipped in the package."""
from __future__ import annotations

import sys
from pathlib import Path

from .record import FrozenRecord, Record
from .limits import Limits


def _tomllib():
    """The TOML reader, imported only when a settings file is read (start-up, see docs/perf.md)."""
    if sys.version_info >= (3, 11):
        import tomllib
    else:  # pragma: no cover
        import tomli as tomllib
    return tomllib

DEFAULT_INCLUDE = ["**/*.yaml", "**/*.yml", "**/*.json", "**/*.sh", "**/*.bash"]
SCHEMA_PATH = Path(__file__).with_name("settings.schema.json")


class KeySpec(FrozenRecord):
    """Where the user's file keeps one concept, and in what unit (the settings' key map)."""

    key: str
    per: str  # prompt | completion
    scope: str  # global | gpu
    fields: tuple  # for reward.sources: ((field, key in component), ...)
    values: tuple  # value synonyms of an enumerated concept: ((as written, meaning), ...)

    def __init__(self, key: str, per: str = "", scope: str = "", fields: tuple = (), values: tuple = ()) -> None:
        object.__setattr__(self, "key", key)
        object.__setattr__(self, "per", per)
        object.__setattr__(self, "scope", scope)
        object.__setattr__(self, "fields", fields)
        object.__setattr__(self, "values", values)

    _fields = ("key", "per", "scope", "fields", "values")  # repr, equality and hash (common/record.py)

    def meaning(self, written):
        """The concept value a value written in the user's file stands for under this key map's
        ``values`` table (compared as text, case and surrounding blanks aside), or None."""
        if not self.values or isinstance(written, (dict, list)) or written is None:
            return None
        text = (str(written).lower() if isinstance(written, bool) else str(written)).strip().lower()
        for said, meant in self.values:
            if said.strip().lower() == text:
                return meant
        return None


class SettingsError(Exception):
    """A setting is wrong; the message names the setting, what was expected and what was found."""


class Settings(Record):
    root: Path
    source: Path | None
    table: str  # "[tool.trimtab]" or "" for a trimtab.toml
    include: list[str]
    exclude: list[str]
    gate: str
    yaml_version: str  # the reader YAML files meet (scalars.READERS) unless readers names another
    yaml_version_set: bool  # written in the settings: the reader is known, not assumed
    readers: dict[str, str]  # glob -> the reader those files meet (first match)
    run_configs: list[str]
    keymap: str
    keys: dict[str, KeySpec]
    search_roots: list[str]
    import_depth: int
    accepted: str
    jobs: int
    limits: Limits
    rules: dict[str, dict]
    layers: list[dict]
    bases_key: str
    defaults_key: str  # the key of a defaults list (composition of named files, config groups)
    launch: dict  # [launch]: how launch scripts are read (linter/compose/shell.py)
    overrides: str
    include_set: bool  # include was written in the settings file (not the default)

    def __init__(
            self, root: Path, source: Path | None = None, table: str = "", include: list[str] | None = None,
            exclude: list[str] | None = None, gate: str = "warning", yaml_version: str = "1.1",
            yaml_version_set: bool = False, readers: dict[str, str] | None = None,
            run_configs: list[str] | None = None, keymap: str = "", keys: dict[str, KeySpec] | None = None,
            search_roots: list[str] | None = None, import_depth: int = 2, accepted: str = "", jobs: int = 1,
            limits: Limits | None = None, rules: dict[str, dict] | None = None, layers: list[dict] | None = None,
            bases_key: str = "", defaults_key: str = "", launch: dict | None = None, overrides: str = "",
            include_set: bool = False
    ) -> None:
        self.root = root
        self.source = source
        self.table = table
        self.include = list(DEFAULT_INCLUDE) if include is None else include
        self.exclude = [] if exclude is None else exclude
        self.gate = gate
        self.yaml_version = yaml_version
        self.yaml_version_set = yaml_version_set
        self.readers = {} if readers is None else readers
        self.run_configs = [] if run_configs is None else run_configs
        self.keymap = keymap
        self.keys = {} if keys is None else keys
        self.search_roots = ["."] if search_roots is None else search_roots
        self.import_depth = import_depth
        self.accepted = accepted
        self.jobs = jobs
        self.limits = Limits() if limits is None else limits
        self.rules = {} if rules is None else rules
        self.layers = [] if layers is None else layers
        self.bases_key = bases_key
        self.defaults_key = defaults_key
        self.launch = {} if launch is None else launch
        self.overrides = overrides
        self.include_set = include_set

    # repr, equality (common/record.py)
    _fields = (
        "root", "source", "table", "include", "exclude", "gate", "yaml_version", "yaml_version_set",
        "readers", "run_configs", "keymap", "keys", "search_roots", "import_depth", "accepted", "jobs",
        "limits", "rules", "layers", "bases_key", "defaults_key", "launch", "overrides", "include_set",
    )

    def check_include(self, used: set, paths_given: bool) -> list[str]:
        """The include globs written in the settings, when trimtab finds the files itself: if
        none matches a file, the settings are wrong (a typo, or the wrong root) and a gate that
        checks nothing would pass everything, so that is an error naming the setting. Globs
        that match nothing beside others that match are returned, for a note."""
        if paths_given or not self.include_set or not self.include:
            return []
        idle = [f"{self.name('include')}[{i}] {p!r}" for i, p in enumerate(self.include) if p not in used]
        if len(idle) == len(self.include):
            raise SettingsError(f"{self.source}: setting {self.name('include')}: expected globs that match at "
                                f"least one file under {self.root}, found {', '.join(idle)}, which match none")
        return idle

    def path(self, key: str, root: Path | None = None) -> Path:
        """The file a path setting (``accepted``, ``overrides``) names, relative to the root, with
        every link followed; refused (SettingsError) when that leaves the repository, as a base
        is. ``root``: where it is looked for instead (the staged mirror of ``check --staged``).
        Nothing is opened here."""
        from .paths import confined

        value = getattr(self, key)
        top = Path(root if root is not None else self.root)
        real = confined(top / value, top)
        if real is None:
            raise SettingsError(f"{self.source}: setting {self.name(key)}: expected a path inside the repository "
                                f"{top}, found {value!r}, which leads outside the repository (through '..', an absolute "
                                "path or a symbolic link); it is not read or written")
        return real

    def name(self, key: str) -> str:
        """How a setting is spelled in the user's file, for messages."""
        prefix = "tool.trimtab." if self.table else ""
        return f"{prefix}{key}"


def find(start: Path | None = None) -> tuple[Path | None, Path]:
    """(settings file or None, repository root). Walks up from ``start``; stops at the first
    trimtab.toml, pyproject.toml with a [tool.trimtab] table, or a git repository's top."""
    here = (start or Path.cwd()).resolve()
    for folder in (here, *here.parents):
        candidate = folder / "trimtab.toml"
        if candidate.is_file():
            return candidate, folder
        candidate = folder / "pyproject.toml"
        if candidate.is_file():
            try:
                text = candidate.read_text(encoding="utf-8")
            except (OSError, UnicodeDecodeError):
                text = ""
            if "[tool.trimtab" in text or "tool.trimtab" in text:
                return candidate, folder
        if (folder / ".git").exists():
            return None, folder
    return None, here


def load(path: Path | None = None, start: Path | None = None) -> Settings:
    if path is None:
        path, root = find(start)
    else:
        path = Path(path)
        root = path.resolve().parent
    if path is None:
        return Settings(root=root)
    tomllib = _tomllib()
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except OSError as exc:
        raise SettingsError(f"{path}: cannot be read: {exc.strerror}") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise SettingsError(f"{path}: is not valid TOML: {exc}") from None
    if path.name == "pyproject.toml":
        table = data.get("tool", {}).get("trimtab")
        if table is None:
            return Settings(root=root)
        prefix = "tool.trimtab"
    else:
        table, prefix = data, ""
    if not isinstance(table, dict):
        raise SettingsError(f"{path}: setting {prefix or '(top level)'}: expected a table, found {_kind(table)}")
    validate(table, path, prefix)
    return build(table, root, path, prefix)


def _kind(value) -> str:
    return {dict: "a table", list: "an array", str: "a string", bool: "a boolean", int: "an integer",
            float: "a number"}.get(type(value), type(value).__name__)


_VALIDATOR = None
_SCHEMA = None


def _schema() -> dict:
    global _SCHEMA
    if _SCHEMA is None:  # read once per process
        import json

        _SCHEMA = json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))
    return _SCHEMA


# The keywords surely_valid understands (annotations and the ones it checks); any other makes it unsure.
_ANNOTATIONS = frozenset({"$schema", "$id", "title", "description", "$comment", "default", "examples"})
_CHECKED = frozenset({"type", "enum", "properties", "additionalProperties", "items", "anyOf", "minLength",
                      "minimum", "maximum", "required"})
_TYPES = {"string": (str,), "array": (list,), "object": (dict,), "boolean": (bool,), "integer": (int,),
          "number": (int, float)}


def surely_valid(schema, value) -> bool:
    """True only when ``value`` certainly satisfies ``schema`` (the subset of JSON Schema draft 7 the
    settings schema is written in); False when it does not, or when this check cannot be sure (a
    keyword it does not know, a float where an integer is asked, a value of another kind). The fast
    path of ``validate``: start-up does not import jsonschema for settings that are plainly valid;
    whenever this says False, jsonschema decides and words the message."""
    if schema is True:
        return True
    if not isinstance(schema, dict) or not set(schema) <= _ANNOTATIONS | _CHECKED:
        return False
    t = schema.get("type")
    if t is not None:
        names = [t] if isinstance(t, str) else t
        if not isinstance(names, list) or not any(
                n in _TYPES and isinstance(value, _TYPES[n]) and not isinstance(value, bool) or
                n == "boolean" and isinstance(value, bool) for n in names):
            return False
    if "enum" in schema and not any(type(value) is type(e) and value == e for e in schema["enum"]):
        return False
    if "minLength" in schema and not (isinstance(value, str) and len(value) >= schema["minLength"]):
        return False
    for bound, ok in (("minimum", lambda v, b: v >= b), ("maximum", lambda v, b: v <= b)):
        if bound in schema:
            if not (isinstance(value, (int, float)) and not isinstance(value, bool) and ok(value, schema[bound])):
                return False
    if "items" in schema and not (isinstance(value, list) and all(surely_valid(schema["items"], v) for v in value)):
        return False
    if "required" in schema and not (isinstance(value, dict) and all(k in value for k in schema["required"])):
        return False
    if "properties" in schema or "additionalProperties" in schema:
        if not isinstance(value, dict):
            return False
        props = schema.get("properties", {})
        extra = schema.get("additionalProperties", True)
        for k, v in value.items():
            sub = props.get(k, extra)
            if sub is False or not surely_valid(sub, v):
                return False
    if "anyOf" in schema and not any(surely_valid(sub, value) for sub in schema["anyOf"]):
        return False
    return True


def validate(table: dict, path: Path, prefix: str) -> None:
    if surely_valid(_schema(), table):  # perf: no jsonschema at start-up for plainly valid settings
        _check_concepts(table, path, prefix)
        return
    import jsonschema

    global _VALIDATOR
    if _VALIDATOR is None:  # built once per process
        _VALIDATOR = jsonschema.Draft7Validator(_schema())
    validator = _VALIDATOR
    errors = sorted(validator.iter_errors(table), key=lambda e: (len(e.absolute_path), list(map(str, e.absolute_path))))
    if not errors:
        _check_concepts(table, path, prefix)
        return
    err = errors[0]
    where = ".".join([prefix] + [str(p) for p in err.absolute_path] if prefix else [str(p) for p in err.absolute_path])
    if err.validator == "additionalProperties":
        allowed = sorted(err.schema.get("properties", {}))
        extra = sorted(set(err.instance) - set(allowed))
        key = ".".join(filter(None, [where, extra[0] if extra else ""]))
        raise SettingsError(f"{path}: setting {key}: unknown setting (expected one of: {', '.join(allowed)})")
    expected = _expected(err)
    raise SettingsError(f"{path}: setting {where or '(top level)'}: expected {expected}, "
                        f"found {_show(err.instance)}")


def _expected(err) -> str:
    import json

    v, val = err.validator, err.validator_value
    if v == "type":
        names = {"array": "an array", "object": "a table", "string": "a string", "integer": "an integer",
                 "boolean": "true or false", "number": "a number"}
        return " or ".join(names.get(t, t) for t in ([val] if isinstance(val, str) else val))
    if v == "enum":
        return "one of " + ", ".join(json.dumps(x) if isinstance(x, str) else str(x) for x in val)
    if v == "minimum":
        return f"a number of at least {val}"
    if v == "maximum":
        return f"a number of at most {val}"
    if v == "required":
        return "the keys " + ", ".join(val)
    if v == "minLength":
        return "a non-empty string"
    if v == "anyOf":
        return "a key path string, or a table with key (and per, scope, fields, values)"
    return err.message


def _show(value) -> str:
    import json

    text = json.dumps(value) if not isinstance(value, str) else repr(value)
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        text += " (a number, not a string)" if isinstance(value, float) else ""
    return text if len(text) <= 60 else text[:57] + "..."


def _check_concepts(table: dict, path: Path, prefix: str) -> None:
    from .vocabulary import CONCEPTS

    dot = f"{prefix}." if prefix else ""
    for concept, spec in table.get("keys", {}).items():
        if concept not in CONCEPTS:
            near = [c for c in CONCEPTS if c.split(".")[-1] == concept.split(".")[-1]]
            hint = f" (did you mean {', '.join(near)}?)" if near else ""
            raise SettingsError(f"{path}: setting {dot}keys.{concept}: expected a concept name, "
                                f"found unknown concept {concept!r}{hint}; `trimtab explain` lists them")
        allowed = CONCEPTS[concept].values
        for said, meant in (spec.get("values", {}) if isinstance(spec, dict) else {}).items():
            if not allowed:
                raise SettingsError(f"{path}: setting {dot}keys.{concept}.values: expected value synonyms only for an "
                                    f"enumerated concept, found them for {concept}, which takes any value")
            if str(meant).strip().lower() not in allowed:
                raise SettingsError(f"{path}: setting {dot}keys.{concept}.values.{said}: expected one of "
                                    f"{', '.join(allowed)}, found {_show(meant)}")


def build(table: dict, root: Path, path: Path | None = None, prefix: str = "") -> Settings:
    s = Settings(root=root, source=path, table=prefix)
    for name in ("include", "exclude", "gate", "yaml_version", "run_configs", "keymap", "search_roots",
                 "import_depth", "accepted", "jobs", "rules", "layers", "bases_key", "overrides", "defaults_key", "launch",
                 "readers"):
        if name in table:
            setattr(s, name, table[name])
    s.include_set = "include" in table
    s.yaml_version_set = "yaml_version" in table
    if "limits" in table:
        s.limits = Limits(**{**Limits().__dict__, **table["limits"]})
    s.keys = parse_keys(table.get("keys", {}))
    return s


def check_published(name: str, table) -> None:
    """A key map a plugin publishes is validated like the user's own [keys] table."""
    where = f"key map {name!r} (from a plugin, chosen by setting keymap)"
    if not isinstance(table, dict):
        raise SettingsError(f"{where}: expected a table of concept -> key path, found {_kind(table)}")
    import json

    import jsonschema

    schema = json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))["properties"]["keys"]
    for err in jsonschema.Draft7Validator(schema).iter_errors(table):
        path = ".".join(str(p) for p in err.absolute_path)
        raise SettingsError(f"{where}: entry {path or '(top level)'}: expected {_expected(err)}, "
                            f"found {_show(err.instance)}")
    _check_concepts({"keys": table}, Path(where), "")


def parse_keys(table: dict) -> dict[str, KeySpec]:
    out = {}
    for concept, spec in table.items():
        if isinstance(spec, str):
            out[concept] = KeySpec(spec)
        else:
            out[concept] = KeySpec(spec["key"], spec.get("per", ""), spec.get("scope", ""),
                                   tuple(sorted(spec.get("fields", {}).items())),
                                   tuple(spec.get("values", {}).items()))
    return out

