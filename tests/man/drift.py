#!/usr/bin/python3
"""The manual pages against the code's own tables, both ways.

Usage: drift.py TABLES_PROGRAM SQUALL_1_SCD SQUALL_PLAN_5_SCD

squall(1): under "# COMMANDS" every command has one "## squall NAME ..." subsection, and the
option lines of that subsection (lines starting with "*-", scdoc's bold, as in "*-o*, *--out*
_DIR_") name exactly the command's options (--help is implicit everywhere and documented once,
under "# OPTIONS"). squall-plan(5): every key is documented on a line of its own starting with its
full path in bold ("*phases[].fleet.agents*"), and every such line is a key the loader accepts.
Under squall(1)'s "# EXIT STATUS", the codes in bold ("*3*") are exactly SQ_EXIT_MAP's.
Prints each difference as a line and exits 1 when there is any."""
import re
import subprocess
import sys

tables = subprocess.run([sys.argv[1]], check=True, capture_output=True, text=True).stdout
commands, options, keys, exits = [], {}, set(), set()
for line in tables.splitlines():
    word = line.split()
    if word[0] == "command":
        commands.append(word[1])
        options[word[1]] = set()
    elif word[0] == "option":
        options[word[1]].update(w for w in word[2:] if w.startswith("-"))
    elif word[0] == "key":
        keys.add(word[1])
    elif word[0] == "exit":
        exits.add(word[1])

bad = []
page1 = open(sys.argv[2]).read().splitlines()
section, cmd, seen, paged_exits = None, None, {}, set()
for n, line in enumerate(page1, 1):
    if line.startswith("# "):
        section, cmd = line[2:].strip(), None
    elif line.startswith("## ") and section == "COMMANDS":
        m = re.match(r"## squall ([a-z]+)", line)
        if not m:
            bad.append(f"squall.1.scd:{n}: a COMMANDS subsection not of the form '## squall NAME'")
            continue
        cmd = m.group(1)
        if cmd in seen:
            bad.append(f"squall.1.scd:{n}: command '{cmd}' documented twice")
        seen[cmd] = set()
    elif section == "EXIT STATUS" and re.fullmatch(r"\*\d+\*", line):
        paged_exits.add(line.strip("*"))
    elif cmd and line.startswith("*-"):
        seen[cmd].update(re.findall(r"\*(--?[A-Za-z][A-Za-z-]*)\*", line))
for c in commands:
    if c not in seen:
        bad.append(f"squall(1): command '{c}' is in the code but has no '## squall {c}' subsection")
        continue
    for o in sorted(options[c] - seen[c]):
        bad.append(f"squall(1): option '{o}' of '{c}' is in the code but not in its subsection")
    for o in sorted(seen[c] - options[c]):
        bad.append(f"squall(1): option '{o}' of '{c}' is in the page but not in the code")
for c in seen:
    if c not in options:
        bad.append(f"squall(1): command '{c}' is in the page but not in the code")

for e in sorted(exits - paged_exits):
    bad.append(f"squall(1): exit code {e} is in SQ_EXIT_MAP but not under EXIT STATUS")
for e in sorted(paged_exits - exits):
    bad.append(f"squall(1): exit code {e} is under EXIT STATUS but not in SQ_EXIT_MAP")

documented = set()
for n, line in enumerate(open(sys.argv[3]).read().splitlines(), 1):
    m = re.match(r"\*([a-z][A-Za-z0-9_.\[\]-]*)\*", line)
    if m and "." in m.group(1) or m and m.group(1) in {k for k in keys if "." not in k}:
        documented.add(m.group(1))
for k in sorted(keys - documented):
    bad.append(f"squall-plan(5): key '{k}' is accepted by the loader but not documented")
for k in sorted(documented - keys):
    bad.append(f"squall-plan(5): key '{k}' is documented but the loader does not accept it")

for b in bad:
    print("FAIL: " + b)
print(f"{'FAIL' if bad else 'ok'}: {len(commands)} commands, "
      f"{sum(len(v) for v in options.values())} option words, {len(keys)} plan keys, "
      f"{len(exits)} exit codes checked "
      f"against the pages")
sys.exit(1 if bad else 0)
