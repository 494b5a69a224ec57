"""The simulated controller board: the firmware references against the field plant, on a pseudo-terminal."""

from compensator.board.firmware import FIRMWARE_VERSION, BoardConfig, BoardFirmware
from compensator.board.simulator import LineFaults, PlantFaults, SimulatedBoard, build_board

__all__ = ["FIRMWARE_VERSION", "BoardConfig", "BoardFirmware", "LineFaults", "PlantFaults", "SimulatedBoard",
           "build_board"]
