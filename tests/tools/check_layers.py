#!/usr/bin/env python3
"""The source layout's one rule: src/ has one folder per layer, and a file
includes headers of its own layer or of layers below it, never above.

    base < numerics < study < eval < methods < reports < cmd

Also checked: every project include names its folder ("eval/records.h"),
so a reader sees the layer of each dependency where it is used.
Usage: check_layers.py SRC_DIR. Exit 0 when the rule holds, 1 with one
line per offending include otherwise."""
import os
import re
import sys

LAYERS = ["base", "numerics", "study", "eval", "methods", "reports", "cmd"]
INCLUDE = re.compile(r'^\s*#\s*include\s+"([^"]+)"', re.M)


def main(src):
    rank = {name: i for i, name in enumerate(LAYERS)}
    bad = []
    found = set(os.listdir(src))
    for extra in sorted(found - set(LAYERS)):
        bad.append(f"{src}/{extra}: not a layer folder ({', '.join(LAYERS)})")
    for layer in LAYERS:
        folder = os.path.join(src, layer)
        if not os.path.isdir(folder):
            continue
        for name in sorted(os.listdir(folder)):
            if not name.endswith((".c", ".h")):
                continue
            path = os.path.join(folder, name)
            with open(path, encoding="utf-8") as f:
                text = f.read()
            for m in INCLUDE.finditer(text):
                inc = m.group(1)
                line = text.count("\n", 0, m.start()) + 1
                where = f"{layer}/{name}:{line}"
                if "/" not in inc:
                    bad.append(f'{where}: include "{inc}" without its layer folder')
                    continue
                target = inc.split("/", 1)[0]
                if target not in rank:
                    bad.append(f'{where}: include "{inc}" is not in a layer folder')
                elif not os.path.exists(os.path.join(src, inc)):
                    bad.append(f'{where}: include "{inc}" does not exist')
                elif rank[target] > rank[layer]:
                    bad.append(f'{where}: {layer} includes "{inc}" from the '
                               f'higher layer {target}')
    for b in bad:
        print(b)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1] if len(sys.argv) > 1 else "src"))
