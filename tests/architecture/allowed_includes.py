"""The architecture check: every #include in src/, include/ and analysis/ must be allowed by
docs/parts.toml (the parts, what each may use, and the crossings still known).

Exit 0 when every include is allowed; exit 1 with one line per forbidden include (file:line, what
it includes, the rule it breaks and the fix) and per entry of the known list the code no longer
has; exit 2 when the parts file itself is unreadable.

Usage: /usr/bin/python3 allowed_includes.py [SOURCE_ROOT]   (default: the repository this file is in)
"""

import os
import re
import sys
import tomllib

INCLUDE = re.compile(r'^\s*#\s*include\s*([<"])([^>"]+)[>"]')
SOURCE_SUFFIXES = (".cpp", ".hpp", ".h", ".hpp.in", ".h.in")


def part_of_file(rel):
    """The part a repository file belongs to, or None for files outside the parts."""
    p = rel.split("/")
    if p[0] == "analysis" and len(p) > 2:
        return p[1]  # a room of the analysis: limits, statistics, reporting
    if p[0] == "include" and len(p) > 4 and p[2] == "analysis":
        return p[3]
    if p[0] == "src" and len(p) > 2:
        return p[1]
    if p[0] == "include" and len(p) == 3:
        return part_of_header(p[2])
    return None


def part_of_header(name):
    """The part of include/freegap/<name>."""
    if name.startswith("analysis/"):
        rest = name.split("/")
        return rest[1] if len(rest) > 2 else name
    if name == "estimator_abi.h":
        return "estimate"
    for suffix in SOURCE_SUFFIXES:
        if name.endswith(suffix):
            return name[: -len(suffix)]
    return name


def load(root):
    path = os.path.join(root, "docs", "parts.toml")
    try:
        with open(path, "rb") as f:
            spec = tomllib.load(f)
    except (OSError, tomllib.TOMLDecodeError) as e:
        sys.exit("allowed_includes: cannot read %s: %s" % (path, e))
    parts = spec.get("parts", {})
    libraries = spec.get("libraries", {})
    for name, part in parts.items():
        for used in part.get("uses", []):
            if used not in parts:
                sys.exit("allowed_includes: %s: part %r uses %r, which is not a part" % (path, name, used))
        for lib in part.get("libraries", []):
            if lib not in libraries:
                sys.exit("allowed_includes: %s: part %r uses library %r, which is not listed under "
                         "[libraries]" % (path, name, lib))
    known = {(k["file"], k["includes"]) for k in spec.get("known", [])}
    return parts, libraries, known


def library_of(header, libraries):
    for name, prefixes in libraries.items():
        for prefix in prefixes:
            if header == prefix or (prefix.endswith("/") and header.startswith(prefix)):
                return name
    return None


def sources(root):
    for top in ("src", "include", "analysis"):
        for dirpath, dirnames, filenames in os.walk(os.path.join(root, top)):
            dirnames.sort()
            for f in sorted(filenames):
                if f.endswith(SOURCE_SUFFIXES):
                    full = os.path.join(dirpath, f)
                    yield os.path.relpath(full, root).replace(os.sep, "/"), full


def check(root):
    parts, libraries, known = load(root)
    problems = []
    seen_known = set()
    for rel, full in sources(root):
        part = part_of_file(rel)
        if part is None:
            continue
        if part not in parts:
            problems.append("%s: its part %r is not in docs/parts.toml; add it there with what it "
                            "may use" % (rel, part))
            continue
        allowed_parts = set(parts[part].get("uses", [])) | {part}
        allowed_libraries = set(parts[part].get("libraries", []))
        with open(full, encoding="utf-8", errors="replace") as f:
            for number, line in enumerate(f, start=1):
                m = INCLUDE.match(line)
                if not m:
                    continue
                header = m.group(2)
                why = None
                if header.startswith("freegap/"):
                    target = part_of_header(header[len("freegap/"):])
                    if target not in parts:
                        why = "%r is no part of docs/parts.toml" % target
                    elif target not in allowed_parts:
                        why = "part %r may not use part %r" % (part, target)
                elif m.group(1) == '"' and ".." in header.split("/"):
                    # A relative include may reach a folder up, within its own part only.
                    target_rel = os.path.normpath(os.path.join(os.path.dirname(rel), header))
                    target = part_of_file(target_rel.replace(os.sep, "/"))
                    if target != part:
                        why = ("a relative include reaches into part %r; include freegap/<part>.hpp"
                               % target)
                else:
                    lib = library_of(header, libraries)
                    if lib is not None and lib not in allowed_libraries:
                        why = "part %r may not use the library %r" % (part, lib)
                if why is None:
                    continue
                if (rel, header) in known:
                    seen_known.add((rel, header))
                    continue
                problems.append("%s:%d: includes %s: %s (docs/parts.toml; move the code to a part "
                                "that may, or change the allowed graph there and in docs/design.md)"
                                % (rel, number, header, why))
    for rel, header in sorted(known - seen_known):
        problems.append("docs/parts.toml: the known crossing %s → %s is gone from the code; remove "
                        "its [[known]] entry" % (rel, header))
    return problems


def main(argv):
    root = os.path.abspath(argv[1]) if len(argv) > 1 else os.path.abspath(
        os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", ".."))
    problems = check(root)
    for p in problems:
        print(p)
    if problems:
        print("allowed_includes: %d include(s) cross the architecture" % len(problems))
        return 1
    print("allowed_includes: every include is allowed by docs/parts.toml")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
