"""A check for schemathesis, loaded by tests/api_schema.sh.

For the posted documents, tests/api_schema.toml accepts 422 as an answer to generated
valid data, because those documents have rules JSON Schema cannot state. This check
keeps that allowance narrow: a 422 to valid data must not name a field whose every rule
the OpenAPI document states, since for such a field the document and the server then
disagree.
"""

import re

import schemathesis

# JSON pointers (into the body) of fields whose rules the document states in full.
FULLY_DESCRIBED = [
    re.compile(r"(/snapshot|/since_snapshot)?/fit/nu"),  # exclusiveMinimum 0
    re.compile(r"/closes/\d+"),  # items: number, exclusiveMinimum 0, not null
    re.compile(r"/annualization"),  # exclusiveMinimum 0
    re.compile(r"/(since_)?snapshot(_id)?"),  # oneOf snapshot / snapshot_id; not both since_*
]


@schemathesis.check
def described_fields_accepted(ctx, response, case):
    """A 422 to valid data names no field the document fully describes."""
    meta = case.meta
    if meta is None or not meta.generation.mode.is_positive or response.status_code != 422:
        return None
    try:
        errors = response.json().get("errors") or []
    except ValueError:
        return None
    named = [e.get("pointer") for e in errors if isinstance(e, dict) and e.get("pointer")]
    wrong = [p for p in named if any(rule.fullmatch(p) for rule in FULLY_DESCRIBED)]
    if wrong:
        raise AssertionError(f"valid data refused for a field the document fully describes: {', '.join(wrong)}")
    return None
