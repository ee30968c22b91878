#!/usr/bin/python3
"""Replaces the section between "<!-- NAME:begin" and "<!-- NAME:end -->" of a results file with
the text on standard input (appended when the file has no such section), and prints it.

Usage: write_section.py NAME FILE < SECTION"""
import os
import re
import sys

name, path = sys.argv[1], sys.argv[2]
section = sys.stdin.read().rstrip("\n")
text = open(path).read() if os.path.exists(path) else "# Benchmark results\n"
pat = re.compile(r"<!-- %s:begin.*?<!-- %s:end -->" % (re.escape(name), re.escape(name)), re.S)
text = pat.sub(lambda m: section, text) if pat.search(text) else text.rstrip("\n") + "\n\n" + section + "\n"
open(path, "w").write(text)
print(section)
