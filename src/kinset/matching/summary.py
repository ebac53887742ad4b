"""An application's one-line summary from its ``summary.json``.

Kept free of numpy, pandas and the matching code: the workflow prints these lines at the
end of every run, a rerun with nothing to do included, whose whole cost is start-up.
"""

from __future__ import annotations


def summary_line(summary: dict) -> str:
    left = ", ".join(f"{n} at {stage}" for stage, n in summary["parts_left"].items()) or "none"
    kept = summary.get("kept_sets", 0)
    check = summary.get("kept_sets_to_check") or []
    kept_text = (f"{kept} kept ({len(check)} to check: set {', '.join(map(str, check))}) + "
                 if check else f"{kept} kept + ") if kept else ""
    new = summary.get("new_sets", summary["sets"])
    return (f"{summary['application']}: {kept_text}{new} new sets of {summary['set_size']} "
            f"(new: at most {summary['upper_bound']} possible; {summary['method']}), "
            f"{summary['parts_used']} of {summary['parts_seen']} parts used; left: {left}")
