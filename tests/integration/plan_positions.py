#!/usr/bin/python3
"""Checks the positions in a bad-*.expected file against the YAML source, independently of squall.

  plan_positions.py PLANS_DIR NAME.expected

Each line of a .expected file is one diagnostic in the plan loader's documented format
(DEVELOPERS.md, "plan"): "@DIR@/FILE:LINE:COL: error: <dotted.path>: <what>", with 1-based
LINE:COL of the offending node. This script parses FILE with PyYAML's pure-Python loader
(yaml.SafeLoader: its own scanner and parser, not libyaml, which squall uses) and checks that
LINE:COL is where a node the message names starts:
  - a node on the dotted path (a key, its value, a list item or the item's `name`), or the
    deepest node that exists when the path ends in a missing key;
  - a key or scalar inside that node whose text the message quotes ('X', but not the
    suggestion of "did you mean 'X'?"), or a key of that node the message names as a word
    ("open and closed loop in one phase (expected rate, ramp, steps or clients, got both)");
  - for "YAML syntax", the position of PyYAML's own syntax error;
and, when a scalar starts there and the message ends in "got 'V')", that its text is V. Positions
a message refers to ("first given at line L, column C", "first at FILE:L:C") must also be node
starts. Prints one "ok" or "FAIL" line per diagnostic; exits 1 if any failed.
"""
import re
import sys

import yaml

LINE = re.compile(r"^@DIR@/(?P<file>[^:]+):(?P<line>\d+):(?P<col>\d+): error: "
                  r"(?P<path>[^:]+): (?P<msg>.+)$")


def compose(path):
    with open(path) as f:
        return yaml.compose(f, Loader=yaml.SafeLoader)


def start(node):
    return (node.start_mark.line + 1, node.start_mark.column + 1)


def walk(node):
    """Every node of a subtree, keys included."""
    yield node
    if isinstance(node, yaml.MappingNode):
        for k, v in node.value:
            yield from walk(k)
            yield from walk(v)
    elif isinstance(node, yaml.SequenceNode):
        for v in node.value:
            yield from walk(v)


def components(path):
    """'objectives[3].class' -> ['objectives', 3, 'class']."""
    out = []
    for part in path.split("."):
        m = re.fullmatch(r"([^\[]*)((?:\[\d+\])*)", part)
        if m.group(1):
            out.append(m.group(1))
        out += [int(i) for i in re.findall(r"\[(\d+)\]", m.group(2))]
    return out


def resolve(root, path):
    """Follows the dotted path; returns (candidate nodes along it, nodes it ends at)."""
    seen, current = [root], [root]
    for comp in components(path):
        nxt = []
        for node in current:
            if isinstance(node, yaml.MappingNode):
                for k, v in node.value:
                    if k.value == comp:
                        seen += [k, v]
                        nxt.append(v)
            elif isinstance(node, yaml.SequenceNode):
                for i, item in enumerate(node.value):
                    name = None
                    if isinstance(item, yaml.MappingNode):
                        name = next((v for k, v in item.value if k.value == "name"), None)
                    if comp == i or (name is not None and name.value == comp):
                        seen.append(item)
                        if name is not None:
                            seen.append(name)
                        nxt.append(item)
        if not nxt:  # the path ends in something missing: the deepest node is the place
            break
        current = nxt
    return seen, current


def node_starts(root):
    return {start(n): n for n in walk(root)}


def check_line(plans, text):
    m = LINE.match(text)
    if not m:
        return "not in the documented format FILE:LINE:COL: error: PATH: WHAT"
    pos = (int(m["line"]), int(m["col"]))
    path, msg = m["path"], m["msg"]
    try:
        root = compose("%s/%s" % (plans, m["file"]))
    except yaml.MarkedYAMLError as e:
        mark = (e.problem_mark.line + 1, e.problem_mark.column + 1)
        if path != "YAML syntax":
            return "PyYAML finds a syntax error at %s:%s but the line is not one" % mark
        return None if pos == mark else "PyYAML's syntax error is at %s:%s" % mark
    if path == "YAML syntax":
        return "PyYAML parses the file without a syntax error"
    seen, ends = resolve(root, path)
    candidates = {start(n) for n in seen}
    named = re.sub(r"\(did you mean '[^']*'\?\)", "", msg)
    words = set(re.findall(r"[A-Za-z][\w-]*", named))
    for quoted in re.findall(r"'([^']*)'", named):
        for end in ends:
            candidates |= {start(n) for n in walk(end) if isinstance(n, yaml.ScalarNode)
                           and n.value == quoted}
    for end in ends:
        if isinstance(end, yaml.MappingNode):
            candidates |= {start(k) for k, _ in end.value if k.value in words}
    if pos not in candidates:
        return "%d:%d is not where a node the message names starts (%s)" % (
            pos + (", ".join("%d:%d" % c for c in sorted(candidates)),))
    at = node_starts(root).get(pos)
    got = re.search(r"got '([^']*)'\)$", msg)
    if got and isinstance(at, yaml.ScalarNode) and at.value != got.group(1):
        return "the scalar at %d:%d is %r, the message says got %r" % (pos + (at.value, got[1]))
    starts = node_starts(root)
    for line, col in re.findall(r"first given at line (\d+), column (\d+)", msg):
        if (int(line), int(col)) not in starts:
            return "'first given at line %s, column %s' is not a node start" % (line, col)
    for f, line, col in re.findall(r"first at @DIR@/([^:]+):(\d+):(\d+)", msg):
        if (int(line), int(col)) not in node_starts(compose("%s/%s" % (plans, f))):
            return "'first at %s:%s:%s' is not a node start" % (f, line, col)
    return None


def main():
    plans, expected = sys.argv[1], sys.argv[2]
    lines = open(expected).read().splitlines()
    bad = not lines
    if not lines:
        print("FAIL: %s is empty" % expected)
    for text in lines:
        why = check_line(plans, text)
        print(("ok: " if why is None else "FAIL: ") + text + ("" if why is None else "\n    " + why))
        bad |= why is not None
    sys.exit(1 if bad else 0)


if __name__ == "__main__":
    main()
