"""``shellmodes schema`` and ``shellmodes keys``: the case-file JSON Schema and the key reference."""

from __future__ import annotations

import json


def add_command(subparsers) -> None:
    s = subparsers.add_parser("schema", help="print the case-file JSON Schema")
    s.set_defaults(func=schema)
    k = subparsers.add_parser("keys", help="print every case-file key with its meaning (Markdown)")
    k.set_defaults(func=keys)


def schema(args) -> int:
    from shellmodes.case.schema import case_schema

    print(json.dumps(case_schema(), indent=2))
    return 0


def keys(args) -> int:
    from shellmodes.case.keys import case_keys_markdown

    print(case_keys_markdown())
    return 0
