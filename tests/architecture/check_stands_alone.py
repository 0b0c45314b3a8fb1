"""The repository stands alone: no file in it points at anything a clone does not have.

Every line of every file of the source tree (the files git tracks, plus new files git does not
ignore; the whole tree, without build directories, when it is not a git checkout) is checked for
  - a path into the folder of notes that sat beside the repository (a path starting with its
    name, "shared", and a slash, or going up to it), or a mention of that folder;
  - the design or style notes (DESIGN or STYLE, then .md) when the repository holds no file of
    that name;
  - the file names of the outside notes on performance, check values and building, and the names
    of the cluster notes and check values other than as a path to their page in `docs/`;
  - a `docs/NAME.md` mention whose file does not exist;
  - in Markdown files, a relative link whose target does not exist.
It prints every offending line as `path:line: reason: text` and fails if there is one.

Usage: /usr/bin/python3 check_stands_alone.py <build_dir>   (the build directory is not used; the
source tree is the parent of tests/)
"""

import os
import re
import subprocess
import sys
from pathlib import Path

SOURCE = Path(__file__).resolve().parents[2]
SELF = Path(__file__).resolve().relative_to(SOURCE).as_posix()

# Pages written on another line of work and announced in docs/README.md before they land; a
# mention of one is accepted while it is missing (and checked like any other once it exists).
ANNOUNCED = set()


def source_files():
    """Paths relative to SOURCE, as posix strings."""
    try:
        out = subprocess.run(["git", "-C", str(SOURCE), "ls-files", "-z", "--cached", "--others",
                              "--exclude-standard"], capture_output=True, check=True).stdout
        if (SOURCE / ".git").exists():
            return sorted({p for p in out.decode().split("\0") if p and (SOURCE / p).is_file()})
    except (OSError, subprocess.CalledProcessError):
        pass
    files = []
    for root, dirs, names in os.walk(SOURCE):
        rel_root = Path(root).relative_to(SOURCE)
        dirs[:] = [d for d in dirs if d != ".git" and not (rel_root == Path(".") and
                                                            d.startswith("build"))]
        files += [(rel_root / n).as_posix() for n in names]
    return sorted(files)


FILES = source_files()
BASENAMES = {Path(p).name for p in FILES}
FILESET = set(FILES)
DIRSET = {Path(p).parent.as_posix() for p in FILES} | {
    q.as_posix() for p in FILES for q in Path(p).parents}

OUTSIDE = [
    # Built from parts so that this file does not itself contain the strings it looks for.
    (re.compile(r"(?<![\w./-])(?:\.\./)*shared" "/"), "path into a folder outside the repository"),
    (re.compile(r"\.\./shared\b"), "path into a folder outside the repository"),
    (re.compile(r"\b(?:the|a) shared folder\b", re.I),
     "mention of a folder outside the repository"),
    # "the design notes" with no docs/ page named on the line: notes a clone does not have.
    (re.compile(r"^(?!.*\bdocs/).*\b(?:build|design) notes\b", re.I),
     "mention of notes outside the repository"),
    (re.compile(r"\breference\s§", re.I), "section of a reference outside the repository"),
    (re.compile(r"\bperf" r"-anchors\b"), "notes outside the repository (docs/performance.md)"),
    (re.compile(r"\bcheck" r"-values-and-methods\b"),
     "notes outside the repository (docs/check-values.md)"),
    (re.compile(r"\bbuild" r"-notes\b"), "notes outside the repository (docs/building.md)"),
]
NAMED_FILES = [re.compile(r"\b(DESIGN|STYLE)\.md\b")]
DOC_STEMS = re.compile(r"(?<![\w.-])((?:[\w.-]+/)*)(cluster" r"-notes|check" r"-values)"
                       r"(?![\w-])(\.md)?")
DOCS_MENTION = re.compile(r"(?<![\w-])((?:\.\.?/)*)docs/([\w./-]*?[\w-]+\.md)\b")
MD_LINK = re.compile(r"\]\(([^()\s]+)\)")


def link_target_exists(md_path, target):
    target = target.split("#", 1)[0].split("?", 1)[0]
    if not target or re.match(r"^[a-z][a-z0-9+.-]*:", target, re.I) or target.startswith("/"):
        return True  # an anchor, a URL or an absolute path: not a file of the repository
    resolved = os.path.normpath((Path(md_path).parent / target).as_posix())
    if resolved.startswith(".."):
        return False
    return resolved in FILESET or resolved in DIRSET or resolved in ANNOUNCED


def check_line(path, text):
    """The reasons this line points outside the repository (empty: none)."""
    reasons = []
    for pattern, reason in OUTSIDE:
        if pattern.search(text):
            reasons.append(reason)
    for pattern in NAMED_FILES:
        for m in pattern.finditer(text):
            if m.group(0) not in BASENAMES:
                reasons.append("%s is not in the repository" % m.group(0))
    in_docs = path.startswith("docs/")
    for m in DOC_STEMS.finditer(text):
        prefix, stem, ext = m.group(1), m.group(2), m.group(3)
        if not ext or not (prefix.endswith("docs/") or (in_docs and not prefix)):
            reasons.append("'%s' is not a path to docs/%s.md" % (m.group(0), stem))
    for m in DOCS_MENTION.finditer(text):
        page = "docs/" + m.group(2)
        if page not in FILESET and page not in ANNOUNCED:
            reasons.append("%s does not exist" % page)
    if path.endswith(".md"):
        for m in MD_LINK.finditer(text):
            if not link_target_exists(path, m.group(1)):
                reasons.append("link target %s does not exist" % m.group(1))
    return reasons


def self_test():
    """The detector itself: lines it must flag and lines it must pass (so a pattern broken into
    matching nothing cannot make this test pass vacuously). Built from parts, as above."""
    up, notes = "../" + "shared", "shared" + "/reference/"
    must_flag = [
        ("src/a.cpp", "// see %s/x" % up),
        ("src/a.cpp", "// (%sbuild%s)" % (notes, "-notes.md")),
        ("src/a.cpp", "// (%s rule 3)" % ("DESIGN" + ".md")),
        ("src/a.cpp", "// (%s §10)" % ("STYLE" + ".md")),
        ("src/a.cpp", "// (reference" + " §1.3)"),
        ("src/a.cpp", "// (perf" + "-anchors §4)"),
        ("src/a.cpp", "// (cluster" + "-notes §3)"),
        ("src/a.cpp", "// in the shared" + " folder"),
        ("src/a.cpp", "// docs/no-such-page.md §2"),
        ("README.md", "[gone](docs/no-such-page.md)"),
        ("docs/x.md", "[up too far](../../outside.md)"),
    ]
    must_pass = [
        ("src/a.cpp", "// docs/cluster-notes.md §3.5 and docs/check-values.md §1.3"),
        ("src/a.cpp", "// a shared matrix, /usr/share/doc, shared_ptr"),
        ("docs/x.md", "[notes](cluster" "-notes.md) [design](design.md) [up](../README.md)"),
        ("README.md", "[docs](docs/README.md), https://example.org/shared" + "/x"),
    ]
    failures = ["not flagged: %s: %s" % c for c in must_flag if not check_line(*c)]
    failures += ["flagged: %s: %s: %s" % (c + (check_line(*c),)) for c in must_pass
                 if check_line(*c)]
    return failures


def main():
    problems = self_test()
    for path in FILES:
        if path == SELF:
            continue  # it names the patterns it looks for
        try:
            text = (SOURCE / path).read_text(encoding="utf-8")
        except (UnicodeDecodeError, OSError):
            continue  # binary files (figures, data) cite nothing
        for number, line in enumerate(text.splitlines(), 1):
            for reason in dict.fromkeys(check_line(path, line)):  # each reason once
                problems.append("%s:%d: %s: %s" % (path, number, reason, line.strip()[:160]))
    if len(FILES) < 10:
        problems.append("only %d files found under %s: not the source tree?" % (len(FILES),
                                                                                 SOURCE))
    for p in problems:
        print(p)
    print("checked %d files: %d problems (references outside the repository or to missing pages)" %
          (len(FILES), len(problems)))
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
