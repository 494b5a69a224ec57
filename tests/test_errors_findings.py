"""The shared error family, findings and fault flags."""

import pytest

from compensator.errors import CompensatorError, InputError, ModelError, ModelTypeError
from compensator.findings import Finding, Severity, worst_severity
from compensator.firmware.faults import FaultFlag, fault_names


def test_model_error_carries_key_and_reason_and_locates_itself():
    err = ModelError("must be positive, got -3", key="time_constant_s")
    assert (err.key, err.reason) == ("time_constant_s", "must be positive, got -3")
    assert isinstance(err, ValueError) and isinstance(err, CompensatorError)
    located = err.at("cooler.yaml", 12)
    assert isinstance(located, InputError)
    assert str(located) == "cooler.yaml:12: time_constant_s: must be positive, got -3"
    assert str(err.at("<command line>", key="--tau-s")) == "<command line>: --tau-s: must be positive, got -3"


def test_model_error_without_key_reads_as_its_reason():
    assert str(ModelError("no crossing")) == "no crossing"
    assert str(ModelError("no crossing").at("a.csv", 0)) == "a.csv: no crossing"


def test_type_errors_derive_from_type_error():
    assert issubclass(ModelTypeError, TypeError) and issubclass(ModelTypeError, CompensatorError)


def test_findings_rank_by_severity():
    found = [Finding(code="a", severity="info", message="x"),
             Finding(code="b", severity=Severity.DANGER, message="y"),
             Finding(code="c", severity="warning", message="z")]
    assert worst_severity(found) is Severity.DANGER
    assert worst_severity([]) is None
    assert str(found[2]) == "warning: z"
    with pytest.raises(ValueError):
        Finding(code="d", severity="fatal", message="unknown severity")


def test_fault_bits_are_stable_wire_values():
    # Values are part of the protocol: renumbering breaks old logbooks and boards.
    assert int(FaultFlag.SENSOR_OPEN) == 1 and int(FaultFlag.HEARTBEAT_LOST) == 128
    assert int(FaultFlag.SUPPLY_FAULT) == 512
    assert fault_names(0b1000_0001) == ["sensor_open", "heartbeat_lost"]
    assert fault_names(1 << 20) == ["bit_20"]
    assert fault_names(0) == []
