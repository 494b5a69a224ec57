"""Regenerate the golden C files after an intended change (never run by the test suite): python tests/golden/update.py"""

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from test_firmware_table_c import GOLDEN_LAYOUTS, golden_files  # noqa: E402


def main() -> None:
    for layout in GOLDEN_LAYOUTS:
        directory = HERE / "tables" / layout
        directory.mkdir(parents=True, exist_ok=True)
        for name, text in golden_files(layout).items():
            (directory / name).write_bytes(text.encode())
            print(f"wrote {directory / name}")
    write_interlocks_and_link()


def write_interlocks_and_link() -> None:
    """The generated C of the interlocks and of the board's link (test_firmware_interlocks_golden.py,
    test_firmware_link_c_golden.py)."""
    from test_firmware_interlocks_golden import GOLDEN_CASES
    from test_firmware_interlocks_golden import golden_files as interlock_files
    from test_firmware_link_c_golden import GOLDEN_NAMES
    from test_firmware_link_c_golden import golden_files as link_files

    sets = [(HERE / "interlocks" / case, interlock_files(case)) for case in GOLDEN_CASES]
    sets += [(HERE / "link" / name, link_files(name)) for name in GOLDEN_NAMES]
    for directory, files in sets:
        directory.mkdir(parents=True, exist_ok=True)
        for name, text in files.items():
            (directory / name).write_bytes(text.encode())
            print(f"wrote {directory / name}")


if __name__ == "__main__":
    main()
