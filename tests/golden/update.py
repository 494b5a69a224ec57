"""Regenerate the golden C files after an intended change (never run by the test suite): python tests/golden/update.py"""

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from test_firmware_table_c import GOLDEN_LAYOUTS, golden_files  # noqa: E402
from test_firmware_pid_golden import GOLDEN_PID, golden_pid_files  # noqa: E402


def main() -> None:
    for layout in GOLDEN_LAYOUTS:
        directory = HERE / "tables" / layout
        directory.mkdir(parents=True, exist_ok=True)
        for name, text in golden_files(layout).items():
            (directory / name).write_bytes(text.encode())
            print(f"wrote {directory / name}")
    for case in GOLDEN_PID:
        directory = HERE / "pid" / case
        directory.mkdir(parents=True, exist_ok=True)
        for name, text in golden_pid_files(case).items():
            (directory / name).write_bytes(text.encode())
            print(f"wrote {directory / name}")


if __name__ == "__main__":
    main()
