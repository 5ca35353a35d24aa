"""Report: findings -> SARIF 2.1.0 (OASIS Static Analysis Results Interchange Format)."""
from __future__ import annotations

from pathlib import Path
from typing import Iterable, TextIO
from urllib.parse import quote

from .. import __version__
from ..engine.registry import Rule
from ..common.findings import Finding, Level, Location
from ..common.redact import mask

SCHEMA_URI = "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
FINGERPRINT_KEY = "trimtabFingerprint/v1"

# Names of the weaknesses trimtab cites, as in MITRE's CWE list.
CWE_NAMES = {
    250: "Execution with Unnecessary Privileges",
    319: "Cleartext Transmission of Sensitive Information",
    502: "Deserialization of Untrusted Data",
    653: "Improper Isolation or Compartmentalization",
    770: "Allocation of Resources Without Limits or Throttling",
    798: "Use of Hard-coded Credentials",
    829: "Inclusion of Functionality from Untrusted Control Sphere",
    1088: "Synchronous Access of Remote Resource without Timeout",
}


def _level(level: Level) -> str:
    return str(level)


def _location(loc: Location, ident: int | None = None) -> dict:
    out: dict = {}
    if ident is not None:
        out["id"] = ident
    if loc.path is None:
        # A value set on the command line has no file: a logical location names the key.
        out["logicalLocations"] = [{"fullyQualifiedName": mask(loc.key_path) or "(command line)", "kind": "property"}]
        out["message"] = {"text": (mask(loc.message) + " " if loc.message else "") + "(set on the command line)"}
        return out
    phys: dict = {"artifactLocation": {"uri": quote(loc.path), "uriBaseId": "SRCROOT"}}
    if loc.line > 0:
        region = {"startLine": loc.line, "startColumn": max(loc.col, 1)}
        if loc.end_line >= loc.line and loc.end_line > 0:
            region["endLine"] = loc.end_line
            if loc.end_col > 0 and (loc.end_line > loc.line or loc.end_col >= region["startColumn"]):
                region["endColumn"] = loc.end_col
        phys["region"] = region
    out["physicalLocation"] = phys
    if loc.message:
        out["message"] = {"text": mask(loc.message)}
    if loc.key_path:
        out["logicalLocations"] = [{"fullyQualifiedName": mask(loc.key_path), "kind": "property"}]
    return out


def _descriptor(rule: Rule) -> dict:
    d: dict[str, object] = {
        "id": rule.id,
        "name": rule.name,
        "shortDescription": {"text": rule.summary},
        "fullDescription": {"text": rule.rationale},
        "help": {"text": (rule.rationale + ("\n\n" + rule.help if rule.help else ""))},
        "defaultConfiguration": {"level": _level(rule.level)},
        "properties": {"area": rule.area, "options": rule.options},
    }
    if rule.cwe:
        d["relationships"] = [{"target": {"id": str(rule.cwe), "toolComponent": {"name": "CWE"}},
                               "kinds": ["relevant"]}]
    return d


def _result(f: Finding, index: dict[str, int]) -> dict:
    res: dict = {
        "ruleId": f.rule_id,
        "level": _level(f.level),
        "message": {"text": mask(f.message)},
        "locations": [_location(f.location)],
        "partialFingerprints": {FINGERPRINT_KEY: f.fingerprint},
    }
    if f.rule_id in index:
        res["ruleIndex"] = index[f.rule_id]
    if f.related:
        res["relatedLocations"] = [_location(r, i) for i, r in enumerate(f.related)]
    if f.cwe:
        res["taxa"] = [{"id": str(f.cwe), "toolComponent": {"name": "CWE"}}]
    props = {}
    if f.key_path:
        props["keyPath"] = mask(f.key_path)
    if f.suggestion:
        props["suggestion"] = mask(f.suggestion)
    if props:
        res["properties"] = props
    # a fix is described only when its text shows no credential (its inserted text cannot be masked)
    if f.fix is not None and f.location.path and mask(f.fix.old) == f.fix.old and mask(f.fix.new) == f.fix.new:
        res["fixes"] = [{
            "description": {"text": f"replace {f.fix.old!r} with {f.fix.new!r}"},
            "artifactChanges": [{
                "artifactLocation": {"uri": quote(f.location.path), "uriBaseId": "SRCROOT"},
                "replacements": [{"deletedRegion": {"charOffset": f.fix.start,
                                                     "charLength": f.fix.end - f.fix.start},
                                  "insertedContent": {"text": f.fix.new}}],
            }],
        }]
    return res


def _log(rules: list[Rule], root: Path, successful: bool, results: list) -> dict:
    cwes = sorted({r.cwe for r in rules if r.cwe})
    run: dict = {
        "tool": {"driver": {
            "name": "trimtab",
            "version": __version__,
            "semanticVersion": __version__,
            "rules": [_descriptor(r) for r in rules],
        }},
        "originalUriBaseIds": {"SRCROOT": {"uri": root.resolve().as_uri().rstrip("/") + "/"}},
        "columnKind": "unicodeCodePoints",
        "invocations": [{"executionSuccessful": successful}],
        "results": results,
    }
    if cwes:
        run["tool"]["driver"]["supportedTaxonomies"] = [{"name": "CWE"}]
        run["taxonomies"] = [{
            "name": "CWE",
            "organization": "MITRE",
            "shortDescription": {"text": "The MITRE Common Weakness Enumeration"},
            "taxa": [{"id": str(c), "name": CWE_NAMES.get(c, f"CWE-{c}"),
                      "shortDescription": {"text": CWE_NAMES.get(c, f"CWE-{c}")}} for c in cwes],
        }]
    return {"$schema": SCHEMA_URI, "version": "2.1.0", "runs": [run]}


def build(findings: Iterable[Finding], rules: Iterable[Rule], root: Path, successful: bool = True) -> dict:
    rules = list(rules)
    index = {r.id: i for i, r in enumerate(rules)}
    return _log(rules, root, successful, [_result(f, index) for f in findings])


def write(findings: Iterable[Finding], rules, root: Path, out: TextIO, successful: bool = True) -> None:
    """The log ``build`` makes, written one result at a time (the same bytes as dumping it whole)."""
    from .text import dump_streamed

    rules = list(rules)
    index = {r.id: i for i, r in enumerate(rules)}
    dump_streamed(_log(rules, root, successful, []), ("runs", 0, "results"),
                  (_result(f, index) for f in findings), out)
    out.write("\n")
