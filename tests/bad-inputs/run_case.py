#!/usr/bin/python3
"""Runs cases of the bad-input catalogue (cases.tsv): each command in a fresh folder, with a time
limit; checks the exit code, that stdout+stderr hold the message fragment, that no final-named
output listed for the case exists afterwards, and that no temporary (".partial-") is left.
Usage: run_case.py PB_BINARY INPUT_DIR WORK_DIR [CASE_ID ...]   (no ids: every case)
Columns of cases.tsv (tab-separated): id, exit code, message fragment, outputs that must not exist
(comma-separated, '-' for none), status ('ok', or 'open: why' for a case not fixed yet), command.
In the command, {PB} is the binary, {IN} the input folder and {BAD} this folder; it runs in its own
empty folder. A command that exits 77 printing "SKIP:" could not set up its condition (skipped)."""
import os, shutil, subprocess, sys

HERE = os.path.dirname(os.path.abspath(__file__))


def load_cases():
    cases = []
    with open(os.path.join(HERE, "cases.tsv")) as f:
        for n, line in enumerate(f, 1):
            if not line.strip() or line.startswith("#"):
                continue
            cols = line.rstrip("\n").split("\t")
            if len(cols) != 6:
                sys.exit("cases.tsv line %d: %d columns, expected 6" % (n, len(cols)))
            cid, code, frag, outs, status, cmd = cols
            cases.append(dict(id=cid, code=int(code), frag=frag, outs=[] if outs == "-" else outs.split(","),
                              status=status, cmd=cmd))
    return cases


def run(case, pb, indir, work):
    d = os.path.join(work, case["id"])
    shutil.rmtree(d, ignore_errors=True)
    os.makedirs(d)
    cmd = case["cmd"].replace("{PB}", pb).replace("{IN}", indir).replace("{BAD}", HERE)
    try:
        r = subprocess.run(["bash", "-c", cmd], cwd=d, capture_output=True, text=True, timeout=60)
    except subprocess.TimeoutExpired:
        return ["hangs: no exit within 60 s"]
    out = r.stdout + r.stderr
    if r.returncode == 77 and "SKIP:" in out:
        return None
    problems = []
    if r.returncode != case["code"]:
        problems.append("exit %d, expected %d" % (r.returncode, case["code"]))
    if case["frag"].lower() not in out.lower():
        problems.append("message lacks %r" % case["frag"])
    for o in case["outs"]:
        if os.path.exists(os.path.join(d, o)):
            problems.append("left a final-named output: " + o)
    for root, _, files in os.walk(d):
        for fn in files:
            if ".partial-" in fn:
                problems.append("left a temporary: " + os.path.join(root, fn))
    if problems:
        problems.append("output: " + out.strip()[-600:])
    return problems


def main():
    pb, indir, work = sys.argv[1:4]
    ids = sys.argv[4:]
    cases = load_cases()
    seen = set()
    for c in cases:
        if c["id"] in seen:
            sys.exit("duplicate case id " + c["id"])
        seen.add(c["id"])
    if ids:
        unknown = set(ids) - seen
        if unknown:
            sys.exit("unknown case ids: " + " ".join(sorted(unknown)))
        cases = [c for c in cases if c["id"] in ids]
    failed = skipped = 0
    for c in cases:
        problems = run(c, os.path.abspath(pb), os.path.abspath(indir), os.path.abspath(work))
        if problems is None:
            skipped += 1
            print("skip %s: the command could not set up its condition here" % c["id"])
            continue
        open_case = c["status"] != "ok"
        if problems and not open_case:
            failed += 1
            print("FAIL %s: %s" % (c["id"], "; ".join(problems)))
        elif problems:
            print("OPEN %s (%s): %s" % (c["id"], c["status"], "; ".join(problems)))
        elif open_case:
            print("FIXED %s: passes now; set its status to ok" % c["id"])
            failed += 1
        else:
            print("ok   %s" % c["id"])
    sys.exit(1 if failed else 77 if skipped == len(cases) else 0)


if __name__ == "__main__":
    main()
