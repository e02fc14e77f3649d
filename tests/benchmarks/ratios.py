"""Prints each benchmark's speed as a ratio to its group's baseline (same run), from pytest-benchmark JSON.

    python tests/benchmarks/ratios.py .benchmarks/ci.json

In each group, the benchmark whose name contains "baseline" is 1.00; a ratio above 1 means
that many times the baseline's throughput (baseline fastest round / this fastest round: the minimum is the least disturbed by other load). Extra figures a
benchmark records in `extra_info` (sizes, peak memory) are printed beside it, and peak memory as
a ratio to the baseline's when both recorded it.
"""

from __future__ import annotations

import json
import sys
from collections import defaultdict


def main(path: str) -> int:
    with open(path, encoding="utf-8") as fh:
        data = json.load(fh)
    groups: dict[str, list[dict]] = defaultdict(list)
    for b in data.get("benchmarks", []):
        groups[b.get("group") or b["name"]].append(b)
    for group, items in sorted(groups.items()):
        base = next((b for b in items if "baseline" in b["name"]), None)
        print(f"\n[{group}]" + ("" if base else "  (no baseline in this group)"))
        for b in sorted(items, key=lambda b: b["stats"]["min"]):
            mean = b["stats"]["min"]
            ratio = f"{base['stats']['min'] / b['stats']['min']:6.2f}x baseline throughput" if base else ""
            extra = ", ".join(f"{k}={v}" for k, v in (b.get("extra_info") or {}).items())
            mem, base_mem = (b.get("extra_info") or {}).get("peak_rss_mb"), ((base or {}).get("extra_info") or {}).get("peak_rss_mb")
            if mem and base_mem and b is not base:
                extra += f", peak memory {mem / base_mem:.2f}x the baseline's"
            print(f"  {b['name']:<48} min {mean:9.4f} s  {ratio}  {extra}".rstrip())
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1] if len(sys.argv) > 1 else ".benchmarks/ci.json"))
