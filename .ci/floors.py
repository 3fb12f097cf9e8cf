"""Print the lowest versions pyproject.toml allows for the main dependencies, as exact pins (`make floors`).

Each `name>=version` of [project.dependencies] becomes `name==version`: the versions the code must work with.
"""

import re
import sys
import tomllib
from pathlib import Path

project = tomllib.loads(Path(sys.argv[1] if len(sys.argv) > 1 else "pyproject.toml").read_text())["project"]
for requirement in project["dependencies"]:
    found = re.fullmatch(r"\s*([A-Za-z0-9_.\-\[\]]+)\s*>=\s*([0-9][0-9A-Za-z.]*)\s*", requirement.split(";")[0])
    if found is None:
        sys.exit(f"no floor in {requirement!r}: give every main dependency as name>=version")
    print(f"{found[1]}=={found[2]}")
