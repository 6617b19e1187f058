#!/usr/bin/env python3
"""The daemon's layers point one way (DEVELOPERS.md, "Layout"): each folder of daemon/ may
include only the folders below it, and the libraries that belong to one layer stay there
(Beast in http/, the JSON library out of the engine, SQLite and every SQL statement in
store/, prometheus-cpp in observe/, OpenSSL in notify/ and http/). Fails naming the file, the line and the include."""
import pathlib
import re
import sys

ROOT = pathlib.Path(__file__).resolve().parent.parent
ORDER = ["common", "batch", "store", "engine", "http", "notify", "feeds", "observe", "web", "api", "cli"]
# Each layer's own allowed project includes beyond the layers below it in ORDER: the order
# alone would let, say, notify include engine; the table says what each really uses.
ALLOWED = {
    "common": {"common"},
    "batch": {"common", "batch"},
    "store": {"common", "store"},
    "engine": {"common", "batch", "store", "engine"},
    "http": {"common", "http"},
    "notify": {"common", "store", "http", "notify"},
    "feeds": {"common", "batch", "engine", "feeds"},
    "observe": {"common", "engine", "http", "notify", "feeds", "observe"},
    "web": {"web"},
    "api": {"common", "batch", "store", "engine", "http", "observe", "web", "api"},
    "cli": set(ORDER),
}
# Outside libraries, by the header that brings them in, and the layers that may use them.
LIBRARIES = {
    "boost/": {"http"},
    "nlohmann/": {"batch", "store", "notify", "feeds", "api", "cli"},
    "librdkafka/": {"feeds", "notify"},
    "sqlite3.h": {"store"},
    "prometheus/": {"observe"},
    "openssl/": {"notify", "http"},
    "yaml-cpp/": set(),
}
INCLUDE = re.compile(r'^\s*#\s*include\s*([<"])([^>"]+)[>"]')


def main():
    problems = []
    daemon = ROOT / "daemon"
    for path in sorted(daemon.rglob("*")):
        if path.suffix not in (".h", ".cpp"):
            continue
        rel = path.relative_to(daemon)
        if len(rel.parts) != 2:
            problems.append(f"{rel}: every source file lives in a layer folder")
            continue
        layer = rel.parts[0]
        if layer not in ALLOWED:
            problems.append(f"{rel}: '{layer}' is not a layer (tests/layers_test.py, ORDER)")
            continue
        for n, line in enumerate(path.read_text().splitlines(), 1):
            m = INCLUDE.match(line)
            if not m:
                continue
            header = m.group(2)
            if header.startswith("daemon/"):
                target = header.split("/")[1]
                if target not in ALLOWED[layer]:
                    problems.append(f"daemon/{rel}:{n}: {layer} may not include {header}")
            for prefix, layers in LIBRARIES.items():
                if header.startswith(prefix) and layer not in layers:
                    problems.append(f"daemon/{rel}:{n}: {layer} may not use {header}")
    # Every SQL statement lives in store/: nothing else prepares or runs one.
    for path in sorted(daemon.rglob("*.cpp")):
        rel = path.relative_to(daemon)
        if rel.parts[0] == "store":
            continue
        for n, line in enumerate(path.read_text().splitlines(), 1):
            if re.search(r"\.(Prepare|Exec)\(", line):
                problems.append(f"daemon/{rel}:{n}: SQL outside store/")
    # The allowed table must itself point downwards.
    for layer, deps in ALLOWED.items():
        for dep in deps:
            if ORDER.index(dep) > ORDER.index(layer):
                problems.append(f"ALLOWED: {layer} lists the higher layer {dep}")
    for p in problems:
        print(p)
    print(f"layers: {len(problems)} problem(s)")
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
