#!/usr/bin/env python3
"""The naming rule of the source: a function declared in a header
src/LAYER/FILE.h is called bk_NOUN_VERB (bk__NOUN_VERB when it is private
to the program), where NOUN is the file's name or a run of its words
("mpi_comm.h" may declare bk_mpi_... and bk_mpi_comm_...), so that a name
says where its code lives. A private header of a folder (method_impl.h)
may declare the functions of any source file there, named after it.

Kept on purpose, listed below with the reason: names that mirror the C
library (bk_malloc, bk_strerror) and the standard names of mathematical
functions (bk_norm_cdf, bk_gamma_p) in special.h.
Usage: check_names.py SRC_DIR. Exit 0 when the rule holds, 1 with one line
per offending declaration otherwise."""
import os
import re
import sys

# header -> names allowed besides the rule, and why.
KEPT = {
    "base/alloc.h": ("bk_malloc bk_calloc bk_realloc bk_free bk_strdup "
                     "bk_strndup", "mirror the C library"),
    "base/error.h": ("bk_strerror", "mirrors strerror"),
    "numerics/special.h": ("*", "standard names of mathematical functions"),
    "cmd/cli.h": ("bk__cmd_*", "one per cmd_NAME.c"),
}
DECL = re.compile(r"^[A-Za-z_][\w \t\*]*?\b(bk_\w+)\s*\(", re.M)


def nouns(stem):
    words = stem.split("_")
    return {"_".join(words[i:j]) for i in range(len(words))
            for j in range(i + 1, len(words) + 1)}


def kept(header, name):
    if header not in KEPT:
        return False
    for pat in KEPT[header][0].split():
        if pat == "*" or name == pat or (pat.endswith("*") and
                                         name.startswith(pat[:-1])):
            return True
    return False


def main(src):
    bad = []
    for layer in sorted(os.listdir(src)):
        folder = os.path.join(src, layer)
        if not os.path.isdir(folder):
            continue
        for name in sorted(os.listdir(folder)):
            if not name.endswith(".h"):
                continue
            header = f"{layer}/{name}"
            with open(os.path.join(folder, name), encoding="utf-8") as f:
                text = f.read()
            text = re.sub(r"/\*.*?\*/", lambda m: "\n" * m.group(0).count("\n"),
                          text, flags=re.S)
            allowed = nouns(name[:-2])
            if name.endswith("_impl.h"):
                for c in os.listdir(folder):
                    if c.endswith(".c"):
                        allowed |= nouns(c[:-2])
            for m in DECL.finditer(text):
                sym = m.group(1)
                if kept(header, sym):
                    continue
                rest = sym[4:] if sym.startswith("bk__") else sym[3:]
                if not any(rest == n or rest.startswith(n + "_")
                           for n in allowed):
                    line = text.count("\n", 0, m.start(1)) + 1
                    bad.append(f"{header}:{line}: {sym} is not named after "
                               f"its file (bk_{name[:-2]}_...)")
    for b in bad:
        print(b)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1] if len(sys.argv) > 1 else "src"))
