"""Combining the reports of ``check --shard I/N`` runs (``calcscout merge``)."""

from __future__ import annotations

from typing import Any

from rules.errors import UsageError

from .explain import load_report
from .report import json_report
from .runner import finish_claim


def merge_reports(paths: list[str]) -> dict[str, Any]:
    reports = [(p, load_report(p)) for p in paths]
    sharded = [(p, r) for p, r in reports if r.get("shard")]
    if len(sharded) != len(reports):
        plain = next(p for p, r in reports if not r.get("shard"))
        raise UsageError(f"{plain} is not the report of a --shard run; merge combines shards")
    stopped = next(((p, r["stopped"]) for p, r in reports if r.get("stopped")), None)
    if stopped is not None:
        raise UsageError(f"{stopped[0]} is the report of a shard stopped by {stopped[1]} before it "
                         "finished; run that shard again")
    files = {r["file"] for _, r in reports}
    if len(files) != 1:
        raise UsageError("the reports are of different rule files: " + ", ".join(sorted(files)))
    n = {r["shard"][1] for _, r in reports}
    if len(n) != 1:
        raise UsageError("the reports split the work in different numbers of shards: "
                         + ", ".join(str(x) for x in sorted(n)))
    total = n.pop()
    seen: dict[int, str] = {}
    for p, r in reports:
        i = r["shard"][0]
        if i in seen:
            raise UsageError(f"{p} and {seen[i]} are both shard {i}/{total}")
        seen[i] = p
    missing = [i for i in range(1, total + 1) if i not in seen]
    if missing:
        raise UsageError(f"shard {missing[0]}/{total} is missing; merge needs all {total}")
    first = reports[0][1]
    names = list(first["records"])
    for p, r in reports[1:]:
        if list(r["records"]) != names:
            raise UsageError(f"{p} checked other claims than {reports[0][0]}")
    verdicts = []
    for claim in names:
        rec = first["records"][claim]
        extra: dict[str, list] = {}
        for _, r in reports[1:]:
            for o in r["records"][claim]["obligations"]:
                if o["kind"] == "relational":
                    extra.setdefault(o["name"], []).extend(o["parts"])
        verdicts.extend(finish_claim(rec, extra))
    return json_report(first["file"], verdicts)
