"""The documents name only things that exist: every plumb command shown in README.md,
DEVELOPERS.md, docs/operators.md, the example TOML files, the alert rules and the systemd
units uses a subcommand and flags its program offers (checked against its --help), and every
repository path they mention (a name with a '/', or a file name ending in .md) is in the
repository: a path starting with one of the repository's top-level directories must exist, and
a bare file name with a source or document extension must exist somewhere in it. Paths
outside it (starting with ../), installation paths (/etc, /var, ...) and the systemd units of
Debian packages (DEBIAN_UNITS) are not checked.

Usage: doc_references_test.py SOURCE_DIR BIN_DIR
"""
import os
import re
import subprocess
import sys

SRC, BIN = sys.argv[1], sys.argv[2]
DOCS = ["README.md", "DEVELOPERS.md", "docs/operators.md", "deploy/prometheus/alerts.yml",
        "deploy/plumb-serve.toml", "deploy/plumb-train.toml", "deploy/systemd/plumb-serve.service",
        "deploy/systemd/plumb-train.service", "deploy/plumb-replica.toml",
        "deploy/systemd/plumb-replica.service", "deploy/systemd/plumb-nats.service",
        "deploy/nats/nats-server.conf", "examples/python/plumb_client.py"]
BINARIES = {"plumb": "cli/plumb", "plumb-serve": "server/plumb-serve",
            "plumb-train": "trainer/online/plumb-train", "plumb-query": "tools/plumb-query",
            "plumb-load": "tools/plumb-load"}
SUBCOMMANDS = {
    "plumb": {"synth", "import", "split", "fit", "tune", "eval", "compare", "versions",
              "activate", "pin", "unpin", "inspect", "repair", "export", "top"},
    "plumb-query": {"recommend", "similar", "rank", "health", "versions", "status", "activate",
                    "pin", "unpin", "auto-activate", "retrain"},
    "plumb-load": {"replay"},
}
# Units that Debian packages install (deploy/systemd/plumb-nats.service replaces one).
DEBIAN_UNITS = {"nats-server.service"}
TOP_DIRS = {e for e in os.listdir(SRC) if os.path.isdir(os.path.join(SRC, e)) and
            not e.startswith((".", "build"))}
FILE_NAMES = {f for root, _, files in os.walk(SRC)
              if not os.path.relpath(root, SRC).startswith(("build", ".git")) for f in files}
help_cache = {}
failures = []


def flags_of(program, sub):
    key = (program, sub)
    if key not in help_cache:
        args = [os.path.join(BIN, BINARIES[program])] + ([sub] if sub else []) + ["--help"]
        text = subprocess.run(args, capture_output=True, text=True, timeout=30).stdout
        help_cache[key] = set(re.findall(r"(--[a-z0-9-]+)", text))
    return help_cache[key]


checked = 0
for doc in DOCS:
    text = open(os.path.join(SRC, doc)).read()
    # Commands: in backticks, or on lines of an indented code block.
    snippets = re.findall(r"`([^`]+)`", text)
    snippets += [l.strip() for l in text.splitlines() if re.match(r"^    (plumb|\$ )", l)]
    for snippet in snippets:
        for m in re.finditer(r"\b(plumb(?:-serve|-train|-query|-load)?)((?:\s+[^\s|;)]+)*)",
                             snippet):
            program, words = m.group(1), m.group(2).split()
            if not words or program not in BINARIES:
                continue
            sub = None
            if program in SUBCOMMANDS and not words[0].startswith("-"):
                if words[0] not in SUBCOMMANDS[program]:
                    continue  # prose such as "plumb store", not a command
                sub = words[0]
            flags = [w.split("=")[0] for w in words if w.startswith("--")]
            if program in SUBCOMMANDS and sub is None and not flags:
                continue
            offered = flags_of(program, sub)
            for flag in flags:
                checked += 1
                if flag not in offered:
                    failures.append("%s: `%s`: %s%s has no flag %s"
                                    % (doc, snippet, program, " " + sub if sub else "", flag))
    # Repository paths.
    for path in set(re.findall(r"(?<![\w./<>-])((?:[\w.-]+/)+[\w.-]+|[\w.-]+\.(?:md|yml|toml|sh|py|proto|cc|h|service))\b", text)):
        if "/" in path:
            if path.split("/")[0] not in TOP_DIRS:
                continue  # e.g. world/events.csv in an example, or a unit like calls/s
            candidates = [path, os.path.join(os.path.dirname(doc), path)]
            if not any(os.path.exists(os.path.join(SRC, c)) for c in candidates):
                failures.append("%s mentions %s, which is not in the repository" % (doc, path))
        elif (path not in FILE_NAMES and not re.match(r"^(plumb|grpc)\.", path)
              and path not in DEBIAN_UNITS):
            failures.append("%s mentions %s, which is not in the repository" % (doc, path))

for f in failures:
    print("FAIL: " + f)
if failures:
    sys.exit("%d document references are wrong" % len(failures))
print("documents: %d flags in %d documents match the programs; every repository path exists"
      % (checked, len(DOCS)))
