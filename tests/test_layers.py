"""The layering of the package, checked by import-linter (its contracts are in pyproject.toml:
each flow's folder imports only the folders below it; nothing below the commands imports a
command; the design knows none of its consumers; the file formats know nothing of the
production line)."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_import_contracts_are_kept() -> None:
    exe = shutil.which("lint-imports", path=str(Path(sys.executable).parent)) \
        or shutil.which("lint-imports")
    assert exe, "import-linter is in the test extra: pip install -e '.[test]'"
    done = subprocess.run([exe], cwd=ROOT, capture_output=True, text=True, check=False)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-2000:]
    assert "4 kept, 0 broken" in done.stdout


def test_no_import_cycle_between_modules() -> None:
    # Reference: import-linter's own graph builder (grimp), independent of our code.
    import grimp

    graph = grimp.build_graph("hosttool")
    cycles = [(a, b) for a in graph.modules for b in graph.find_modules_directly_imported_by(a)
              if a != b and graph.direct_import_exists(importer=b, imported=a)]
    assert cycles == []
