#!/usr/bin/env python3
"""The version lives in one place (CMakeLists.txt) and CHANGELOG.md has a section for it.
usage: changelog_test.py VERSION"""
import pathlib
import re
import sys

version = sys.argv[1]
text = (pathlib.Path(__file__).resolve().parent.parent / "CHANGELOG.md").read_text()
sections = re.findall(r"^## (\S+)", text, re.M)
if version not in sections:
    print("CHANGELOG.md has no section '## %s' (sections: %s)" % (version, ", ".join(sections)))
    sys.exit(1)
print("CHANGELOG.md has a section for", version)
