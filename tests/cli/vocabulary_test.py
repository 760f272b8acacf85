"""One vocabulary across plumb's programs (DEVELOPERS.md, "One vocabulary for every program").

Parses the flag table in DEVELOPERS.md and the --help of every program and subcommand, then
checks that:
  - every flag a program offers is in the table, with the program listed in its row;
  - its kind matches the row: a switch takes no value, a boolean pair is offered as
    --x,--no-x, N is an integer, X a number, anything else (DURATION, FILE, ...) a text;
  - a DURATION's default, when shown, carries a unit;
  - a required flag shows no default;
  - --version is offered at each program's top level and nowhere below it, and prints
    "<program> <version>" with exit 0;
  - an unknown flag is a usage error with exit 2, for every program and subcommand.

Usage: vocabulary_test.py DEVELOPERS.md BIN_DIR
"""
import re
import subprocess
import sys

DOC, BIN = sys.argv[1], sys.argv[2]
PROGRAMS = {
    "plumb": (BIN + "/cli/plumb", ["synth", "import", "split", "fit", "tune", "eval",
                                   "compare", "versions", "activate", "pin", "unpin", "inspect",
                                   "repair", "export", "top"]),
    "plumb-serve": (BIN + "/server/plumb-serve", []),
    "plumb-train": (BIN + "/trainer/online/plumb-train", []),
    "plumb-query": (BIN + "/tools/plumb-query", ["recommend", "similar", "rank", "health",
                                                 "versions", "status", "activate", "pin",
                                                 "unpin", "auto-activate", "retrain",
                                                 "items withdraw", "items restore", "items list"]),
    "plumb-load": (BIN + "/tools/plumb-load", ["replay"]),
}
DURATION = re.compile(r"^(0|[0-9]+(\.[0-9]+)?(ms|s|m|h|d))$")

# ---- the table -----------------------------------------------------------------------------
table = {}  # flag -> (kind, programs)
in_section = False
for line in open(DOC).read().splitlines():
    if line.startswith("## "):
        in_section = line.startswith("## One vocabulary")
    if not in_section or not line.startswith("| `--"):
        continue
    cells = [c.strip() for c in line.strip().strip("|").split("|")]
    flags = re.findall(r"`(--[a-z0-9-]+)`", cells[0])
    kinds = [k.strip() for k in cells[1].split(",")]
    # "plumb (eval, compare), plumb-train": a program, optionally limited to subcommands.
    programs = {}
    for name, subs in re.findall(r"(all|plumb(?:-[a-z]+)?)(?:\s*\(([^)]*)\))?", cells[3]):
        programs[name] = {s.strip() for s in subs.split(",")} if subs else None
    for n, flag in enumerate(flags):
        kind = kinds[n] if len(kinds) == len(flags) else kinds[0]
        table[flag] = (kind, programs)
if len(table) < 50:
    sys.exit("FAIL: found only %d flags in the table of %s" % (len(table), DOC))

# ---- the help texts ------------------------------------------------------------------------
OPTION = re.compile(r"^\s{1,4}(?:-[a-z],)?(--[a-z0-9-]+(?:,--[a-z0-9-]+)*)(\{[a-z]+\})?(.*)$")
failures = []


def fail(message):
    failures.append(message)
    print("FAIL: " + message)


def run(args):
    return subprocess.run(args, capture_output=True, text=True, timeout=60)


def check_help(program, binary, sub):
    args = [binary] + (sub.split() if sub else []) + ["--help"]
    result = run(args)
    where = program + (" " + sub if sub else "")
    if result.returncode != 0:
        fail("%s --help exits %d" % (where, result.returncode))
        return set()
    seen = set()
    for line in result.stdout.splitlines():
        m = OPTION.match(line)
        if not m:
            continue
        names = m.group(1).split(",")
        raw = m.group(3)
        # CLI11 writes a value's type right after the name ("--db TEXT REQUIRED"); a switch's
        # description follows after padding.
        takes_value = re.match(r"^ (TEXT|UINT|INT|FLOAT|BOOLEAN)\b", raw) is not None
        rest = raw.strip()
        pair = len(names) == 2 and names[1] == "--no-" + names[0][2:]
        flag = names[0]
        seen.add(flag)
        if flag == "--version" and sub:
            fail("%s offers --version below the top level (a stored version is "
                 "--model-version)" % where)
        if flag not in table:
            fail("%s offers %s, which DEVELOPERS.md's vocabulary does not list" % (where, flag))
            continue
        kind, programs = table[flag]
        allowed = "all" in programs or (
            program in programs and (programs[program] is None or (sub in programs[program])))
        if not allowed:
            fail("%s offers %s; its row does not list it there (%s)"
                 % (where, flag, line.strip()))
        type_text = rest.split()[0] if takes_value else ""
        if kind == "—":
            ok = not takes_value and len(names) == 1
        elif kind == "--x/--no-x":
            ok = not takes_value and pair
        elif kind == "N":
            ok = type_text.startswith(("UINT", "INT"))
        elif kind == "X":
            ok = type_text.startswith("FLOAT")
        elif kind == "LIST":  # comma-separated values of any type
            ok = type_text.startswith(("TEXT", "FLOAT", "UINT", "INT"))
        else:
            ok = type_text.startswith("TEXT")
        if not ok:
            fail("%s: %s is offered as %r, but its kind is %s" % (where, flag, line.strip(), kind))
        default = re.search(r"=(\S+)", rest) if takes_value else None
        if kind == "DURATION" and default and not DURATION.match(default.group(1)):
            fail("%s: %s's default %s has no unit" % (where, flag, default.group(1)))
        if "REQUIRED" in rest and default:
            fail("%s: %s is required but shows a default (%s)" % (where, flag, default.group(1)))
    return seen


for program, (binary, subs) in PROGRAMS.items():
    top = check_help(program, binary, None)
    if "--version" not in top:
        fail("%s does not offer --version" % program)
    for sub in subs:
        check_help(program, binary, sub)
    result = run([binary, "--version"])
    if result.returncode != 0 or not re.match(r"^%s [0-9]+\.[0-9]+\.[0-9]+\n$" % program,
                                                result.stdout):
        fail("%s --version: exit %d, printed %r" % (program, result.returncode, result.stdout))
    for sub in [None] + subs:
        args = [binary] + (sub.split() if sub else []) + ["--no-such-flag"]
        result = run(args)
        if result.returncode != 2:
            fail("%s: an unknown flag exits %d, not 2" % (" ".join(args[:-1]), result.returncode))
        elif not result.stderr.strip():
            fail("%s: an unknown flag says nothing on stderr" % " ".join(args[:-1]))

if failures:
    sys.exit("%d vocabulary failures" % len(failures))
print("vocabulary: %d flags in the table; every program and subcommand agrees with it"
      % len(table))
