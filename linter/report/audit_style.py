"""The audit page's one stylesheet and its Content-Security-Policy (the style block is allowed by its
SHA-256 hash; nothing else may load)."""
from __future__ import annotations

import base64
import hashlib

from .audit_svg import BROKEN_FILL, BROKEN_INK

# --- style and policy -----------------------------------------------------------------------------
CSS = """
:root{--err:#b3261e;--warn:#8a5300;--note:#1d5b94;--ink:#1b1b1b;--muted:#5b5b5b;--rule:#d5d5d5}
*{box-sizing:border-box}
body{font:15px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,"Liberation Sans",Arial,sans-serif;color:var(--ink);
background:#fff;margin:0 auto;max-width:1040px;padding:16px 24px 48px}
h1{font-size:26px;margin:4px 0 8px}h2{font-size:21px;margin:28px 0 6px;border-top:3px solid var(--ink);
padding-top:12px;overflow-wrap:anywhere}h3{font-size:17px;margin:18px 0 6px}
code{font:13px/1.4 ui-monospace,"DejaVu Sans Mono","Liberation Mono",Menlo,Consolas,monospace}
a{color:#0b4f8a}.muted{color:var(--muted)}
.verdict{font-size:17px;padding:8px 12px;border:3px solid var(--ink);display:inline-block;margin:4px 0 10px}
.verdict-fails{border-color:var(--err);border-style:double;border-width:5px}
.verdict-passes{border-style:solid}.verdict-incomplete{border-style:dashed}
table{border-collapse:collapse}
.summary th,.summary td{border:1px solid var(--rule);padding:4px 12px;text-align:center}
.toc{margin:8px 0;padding-left:22px}
.lvl-error{color:var(--err)}.lvl-warning{color:var(--warn)}.lvl-note{color:var(--note)}
.finding-index{padding-left:22px}.finding-index li{margin:2px 0}
.finding{color:var(--ink);border-left:6px solid;padding:6px 10px;margin:4px 0 8px;background:#fafafa;
font-size:14px;white-space:normal}
.finding p{margin:2px 0}.finding .related{margin:2px 0;padding-left:18px}
.finding.lvl-error{border-color:var(--err);border-left-style:solid;background:#fdeeed}
.finding.lvl-warning{border-color:var(--warn);border-left-style:dashed;background:#fff6e5}
.finding.lvl-note{border-color:var(--note);border-left-style:dotted;background:#eef4fb}
.finding .level{font-weight:700;letter-spacing:.04em}.finding .rule{font-weight:700}
.finding.lvl-error .shape,.finding.lvl-error .level{color:var(--err)}
.finding.lvl-warning .shape,.finding.lvl-warning .level{color:var(--warn)}
.finding.lvl-note .shape,.finding.lvl-note .level{color:var(--note)}
.src{width:100%;border:1px solid var(--rule);margin:6px 0 12px}
.src td{vertical-align:top;padding:0 8px}
.src .ln{text-align:right;color:var(--muted);user-select:none;width:3.5em;border-right:1px solid var(--rule)}
.src .ln a{color:var(--muted);text-decoration:none}
.src .code code{white-space:pre-wrap;word-break:break-all}
.src tr.has-error .ln{border-right:5px solid var(--err)}
.src tr.has-warning .ln{border-right:5px dashed var(--warn)}
.src tr.has-note .ln{border-right:5px dotted var(--note)}
.src tr.has-related .code{background:#f1f1f9}
.src tr:target{outline:2px solid #0b4f8a;background:#fffbd6}
.rel-mark{display:inline-block;margin-left:16px;font-size:12px;color:var(--muted)}
.steps{padding-left:22px}.steps li{margin:2px 0}
.broken-text{color:#a50f15}.ok-text{color:#2e6b2e}
.concepts{width:100%;font-size:13px;margin:4px 0 10px}
.concepts th,.concepts td{border-bottom:1px solid var(--rule);padding:3px 6px;text-align:left;vertical-align:top;
overflow-wrap:break-word}
.scroll{overflow-x:auto}
svg{max-width:100%;height:auto;display:block;margin:6px 0 4px;border:1px solid var(--rule);background:#fff}
svg text{font:12px system-ui,"Liberation Sans",Arial,sans-serif;fill:#1b1b1b}
svg .step-title{font-weight:700;font-size:13px}
svg .qty{font-size:13px}svg .num{font-weight:700}
svg .origin{fill:#0b4f8a;font-size:11px;text-decoration:underline}
svg .in-bar{font-size:11px}svg .above{fill:#444}
svg .note{fill:#444;font-size:11px}svg .strong{font-weight:700;fill:#1b1b1b;font-size:12px}
svg .lane{font-size:10px;fill:#555}
svg rect{stroke:#fff;stroke-width:1}
.bar-prompt{fill:#9cc3e4}.bar-prompt.alt{fill:#7fb0da}
.bar-group{fill:#b7dcb0}.bar-group.alt{fill:#93c98a}
.bar-compl{fill:#c9c2e6}
.bar-mini{fill:#f2d39b}.bar-mini.alt{fill:#e8bc6a}
.bar-micro{fill:#a7d5d1}.bar-micro.alt{fill:#7fc2bc}
.bar-response{fill:#d9b8e0}.bar-ctx{fill:#e4e4e4}
svg rect.dense{stroke:none}
.unknown-box{fill:#fff;stroke:#888 !important;stroke-dasharray:5 4}
.zoom{stroke:#999;stroke-dasharray:3 3;fill:none}
.limit{stroke:#333;stroke-width:1.5;stroke-dasharray:6 3;fill:none}
.broken-fill{fill:""" + BROKEN_FILL + """;stroke:none}
.broken-edge{stroke:""" + BROKEN_INK + """;stroke-width:2}
.hatch-line{fill:""" + BROKEN_INK + """;stroke:none}
svg .broken-label{fill:""" + BROKEN_INK + """;font-weight:700;font-size:12px}
footer{margin-top:32px;color:var(--muted);font-size:13px;border-top:1px solid var(--rule)}
.back{font-size:13px}
@media print{
body{max-width:none;padding:0;font-size:11pt}
a{color:inherit;text-decoration:none}
h2{break-before:page}section.config:first-of-type h2{break-before:auto}
.finding,.src tr,svg{break-inside:avoid}
.finding{background:none !important}
.src tr:target{outline:none;background:none}
nav,.back{display:none}
.scroll{overflow:visible}
svg{border:none}
}
"""


def csp() -> str:
    digest = base64.b64encode(hashlib.sha256(CSS.encode("utf-8")).digest()).decode("ascii")
    return (f"default-src 'none'; style-src 'sha256-{digest}'; img-src 'none'; script-src 'none'; "
            "base-uri 'none'; form-action 'none'")


# --- the command -----------------------------------------------------------------------------------
