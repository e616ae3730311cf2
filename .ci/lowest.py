"""Print pip constraints that pin every dependency to the lowest version pyproject.toml allows.

Used by ``.ci/run`` to install the floors (``name>=X`` becomes ``name==X``) and run the
suite on them, so that the floors the project declares are floors it is tested at.
Reads the project's dependencies and the given extras; standard library only.
"""

import re
import sys
import tomllib
from pathlib import Path


def floors(extras: list[str]) -> list[str]:
    doc = tomllib.loads((Path(__file__).resolve().parents[1] / "pyproject.toml").read_text(encoding="utf-8"))
    reqs = list(doc["project"]["dependencies"])
    for extra in extras:
        reqs += doc["project"]["optional-dependencies"][extra]
    out = []
    for req in reqs:
        m = re.match(r"\s*([A-Za-z0-9_.-]+)(\[[^\]]*\])?\s*>=\s*([0-9][^,;\s]*)", req)
        if m:
            out.append(f"{m.group(1)}=={m.group(3)}")
    return out


if __name__ == "__main__":
    print("\n".join(floors(sys.argv[1:])))
