#!/usr/bin/env python3
"""Functions short enough to read at once: no function body in src/, include/ or analysis/ longer
than 80 lines (from its opening brace to its closing one; lambdas and local classes count as part
of the function that holds them). docs/design.md, "Code".

Exit 0 when every function is short enough; exit 1 listing each longer one (file:line, name,
lines) with the fix: split it into steps with names of their own.

Usage: /usr/bin/python3 check_function_length.py [BUILD_DIR]   (the build directory is not used;
CTest passes it to every check)
"""

import os
import pathlib
import re
import sys

LIMIT = 80
ROOT = os.path.abspath(os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", ".."))


def strip(text):
    """The text without comments, string and character literals (newlines kept)."""
    out=[];i=0;n=len(text)
    while i<n:
        c=text[i]
        if text.startswith('//',i):
            j=text.find('\n',i); j=n if j<0 else j; i=j; continue
        if text.startswith('/*',i):
            j=text.find('*/',i+2); seg=text[i:j+2]; out.append('\n'*seg.count('\n')); i=j+2; continue
        m=re.match(r'R"([^(]*)\(',text[i:i+40])
        if m:
            end=')'+m.group(1)+'"'; j=text.find(end,i+len(m.group(0))); seg=text[i:j+len(end)]
            out.append('""'+'\n'*seg.count('\n')); i=j+len(end); continue
        if c=='"' or (c=="'" and not (i>0 and text[i-1].isalnum())):
            j=i+1
            while j<n and text[j]!=c:
                if text[j]=='\\': j+=1
                j+=1
            out.append(c+c); i=j+1; continue
        out.append(c); i+=1
    return ''.join(out)
def functions(path):
    """(lines, first line, name) of every function body defined at namespace or class scope."""
    t=strip(pathlib.Path(path).read_text())
    stack=[]  # kinds: 'ns','class','fn','other'
    res=[]; buf=''; line=1
    for k,ch in enumerate(t):
        if ch=='\n': line+=1
        if ch=='{':
            head=buf.strip()
            inner=any(s[0]=='fn' for s in stack)
            if inner: kind='other'
            elif re.search(r'\bnamespace\b[^;{}]*$',head) or re.search(r'extern\s*""\s*$',head): kind='ns'
            elif re.search(r'\b(class|struct|union|enum)\b[^;(){}]*$',head): kind='class'
            elif re.search(r'\)\s*(const|noexcept|override|final|mutable|->\s*[\w:<>,\s\*&]+|\s)*$',head) or re.search(r'\)\s*:\s*[\s\S]*\)\s*$',head):
                kind='fn'
            else: kind='other'
            m=re.search(r'([~\w:]+(?:operator\s*\S+)?)\s*\([^;]*$',head)
            stack.append((kind,line,m.group(1) if m else head[-40:]))
            buf=''
        elif ch=='}':
            kind,start,name=stack.pop()
            if kind=='fn': res.append((line-start+1,start,name))
            buf=''
        elif ch==';':
            buf=''
        else:
            buf+=ch
    return res


def main():
    long = []
    for top in ("src", "include", "analysis"):
        for dirpath, dirnames, filenames in os.walk(os.path.join(ROOT, top)):
            dirnames.sort()
            for f in sorted(filenames):
                if f.endswith((".cpp", ".hpp", ".h", ".c")):
                    path = os.path.join(dirpath, f)
                    rel = os.path.relpath(path, ROOT)
                    for lines, start, name in functions(path):
                        if lines > LIMIT:
                            long.append((rel, start, name, lines))
    for rel, start, name, lines in long:
        print("%s:%d: %s is %d lines long (limit %d): split it into steps with names of their own"
              % (rel, start, name, lines, LIMIT))
    if long:
        print("check_function_length: %d function(s) over %d lines" % (len(long), LIMIT))
        return 1
    print("check_function_length: every function is at most %d lines" % LIMIT)
    return 0


if __name__ == "__main__":
    sys.exit(main())
