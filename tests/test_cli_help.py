"""``--help`` shows the options in the groups a user thinks in."""

from __future__ import annotations

import re

from click.testing import CliRunner

from layoutcheck.cli import main

GROUPS = ("Inputs", "Outputs", "Tolerances", "Batch", "Hand-off to OCR")


def groups_of(text: str) -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    current = None
    for line in text.splitlines():
        head = re.match(r"^  (\S[^:]*): *$", line)
        if head:
            current = head.group(1)
            out[current] = []
        elif current and (opt := re.match(r"^    (?:-\w, )?(--[\w-]+)", line)):
            out[current].append(opt.group(1))
    return out


def test_verify_options_come_in_groups_in_order():
    res = CliRunner().invoke(main, ["verify", "--help"])
    assert res.exit_code == 0
    g = groups_of(res.output)
    assert tuple(g) == GROUPS
    assert g["Outputs"] == ["--json", "--report", "--quiet"]
    assert g["Batch"] == ["--jobs", "--resume", "--page-timeout", "--max-memory", "--max-content-mb", "--max-drawing-ops",
                          "--engine", "--scheduler"]
    assert g["Tolerances"][0] == "--max-skew" and len(g["Tolerances"]) == 9 and g["Tolerances"][-3:] == ["--min-dpi", "--max-cut", "--max-warp"]
    # Every option of the command is in exactly one group (only --help stands alone).
    # (the option-group package adds a nameless stand-in option per group heading)
    params = [p for p in main.commands["verify"].params if p.param_type_name == "option" and p.opts]
    grouped = [o for opts in g.values() for o in opts]
    assert sorted(grouped) == sorted(max(p.opts, key=len) for p in params if "--help" not in p.opts)


def test_watch_has_verify_options_and_its_own():
    res = CliRunner().invoke(main, ["watch", "--help"])
    g = groups_of(res.output)
    assert tuple(g) == ("Watching", *GROUPS)
    assert g["Watching"] == ["--out", "--once", "--settle"]
    verify = groups_of(CliRunner().invoke(main, ["verify", "--help"]).output)
    # The same options as verify, but --resume: a watched inbox always resumes from its journal.
    assert {k: v for k, v in g.items() if k != "Watching"} == {
        k: [o for o in v if o != "--resume"] for k, v in verify.items()}
