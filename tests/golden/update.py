"""Regenerate the golden C files after an intended change (never run by the test suite): python tests/golden/update.py

Review the diff before committing: the golden files are the generated C that the golden tests compare with.
"""

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from test_firmware_interlocks_golden import GOLDEN_CASES  # noqa: E402
from test_firmware_interlocks_golden import golden_files as interlock_files  # noqa: E402
from test_firmware_link_c_golden import GOLDEN_NAMES  # noqa: E402
from test_firmware_link_c_golden import golden_files as link_files  # noqa: E402
from test_firmware_pid_golden import GOLDEN_PID, golden_pid_files  # noqa: E402
from test_firmware_table_c import GOLDEN_LAYOUTS, golden_files  # noqa: E402


def golden_sets() -> list[tuple[Path, dict[str, str]]]:
    """Every golden folder with the files the tests expect in it: tables, PID, interlocks, the board's link."""
    sets = [(HERE / "tables" / layout, golden_files(layout)) for layout in GOLDEN_LAYOUTS]
    sets += [(HERE / "pid" / case, golden_pid_files(case)) for case in GOLDEN_PID]
    sets += [(HERE / "interlocks" / case, interlock_files(case)) for case in GOLDEN_CASES]
    sets += [(HERE / "link" / name, link_files(name)) for name in GOLDEN_NAMES]
    return sets


def main() -> None:
    for directory, files in golden_sets():
        directory.mkdir(parents=True, exist_ok=True)
        for name, text in files.items():
            (directory / name).write_bytes(text.encode())
            print(f"wrote {directory / name}")


if __name__ == "__main__":
    main()
