#!/usr/bin/env python3
"""Compares two armspace reports field by field.

Used by scripts/compare_reports.sh to show that a refactoring leaves every
report byte-identical in what it had before. Fields named with --new may
exist only in the second report (fields a change adds); `created_utc` is
ignored. Exit status 0 when identical under those rules, 1 otherwise, with
the first differences printed.
"""
import argparse
import json
import sys


def walk(a, b, path, new_fields, out):
    if isinstance(a, dict) and isinstance(b, dict):
        for k in a:
            if k == "created_utc":
                continue
            if k not in b:
                out.append(f"{path}.{k}: missing in the second report")
            else:
                walk(a[k], b[k], f"{path}.{k}", new_fields, out)
        for k in b:
            if k not in a and k not in new_fields:
                out.append(f"{path}.{k}: only in the second report")
    elif isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            out.append(f"{path}: {len(a)} items against {len(b)}")
        for i, (x, y) in enumerate(zip(a, b)):
            walk(x, y, f"{path}[{i}]", new_fields, out)
    elif a != b or type(a) is not type(b):
        out.append(f"{path}: {a!r} != {b!r}")


def main():
    p = argparse.ArgumentParser()
    p.add_argument("old")
    p.add_argument("new")
    p.add_argument("--new", dest="new_fields", action="append", default=[],
                   help="a field name the second report may add (repeatable)")
    a = p.parse_args()
    with open(a.old) as f:
        old = json.load(f)
    with open(a.new) as f:
        new = json.load(f)
    out = []
    walk(old, new, "$", set(a.new_fields), out)
    for line in out[:40]:
        print(line)
    if out:
        print(f"{len(out)} difference(s) between {a.old} and {a.new}")
        return 1
    print(f"identical: {a.old} and {a.new}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
