"""Images for upload: a table and PID coefficients survive the round trip exactly; bad images are refused."""

from __future__ import annotations

import json

import numpy as np
import pytest

from compensator.firmware.pid import FixedPid, PidSettings, quantise_pid
from compensator.link.images import ImageError, image_sha256, pid_image, read_image, table_image
from compensator.link.protocol import MAX_IMAGE_BYTES


@pytest.fixture(scope="module")
def table(sipm_a, board_ntc):
    from compensator.firmware.tables import build_table
    from compensator.law.laws import build_law

    return build_table(build_law(sipm_a, board_ntc, 3.0), board_ntc, 0.05)


def test_table_round_trip_is_exact_at_every_code(table):
    image = table_image(table)
    kind, again = read_image(image)
    codes = np.arange(0, 1 << table.code_type_bits)
    assert kind == "lookup_table"
    assert np.array_equal(table.lookup(codes)[0], again.lookup(codes)[0])
    assert np.array_equal(table.lookup(codes)[1], again.lookup(codes)[1])
    assert table_image(again) == image                       # canonical: same table, same bytes
    assert image_sha256(image) == __import__("hashlib").sha256(image).hexdigest()
    assert len(image) < MAX_IMAGE_BYTES


def test_pid_round_trip_steps_identically():
    coeffs = quantise_pid(PidSettings(kp=0.8, ki_per_s=0.05, kd_s=2.0, sample_time_s=0.1, out_min=-2.0, out_max=2.0),
                          input_per_count=0.001, output_per_count=0.001)
    kind, again = read_image(pid_image(coeffs))
    assert kind == "pid_coefficients"
    a, b = FixedPid(coeffs), FixedPid(again)
    rng = np.random.default_rng(2)
    for r, y in rng.integers(-3000, 3000, size=(500, 2)):
        assert a.step(int(r), int(y)) == b.step(int(r), int(y))


@pytest.mark.parametrize("data, words", [
    (b"\xff\xfe", "not a compensator image"),
    (b"[]", "not a compensator image"),
    (json.dumps({"image": "lookup_table", "format": 2, "fields": {}}).encode(), "image format 2"),
    (json.dumps({"image": "weights", "format": 1, "fields": {}}).encode(), "unknown image kind"),
    (json.dumps({"image": "lookup_table", "format": 1, "fields": {"bogus": 1}}).encode(), "valid record"),
    (json.dumps({"image": "pid_coefficients", "format": 1,
                 "fields": {"x": {"record": "Nope", "fields": {}}}}).encode(), "unknown record 'Nope'"),
])
def test_bad_images_are_refused(data, words):
    with pytest.raises(ImageError) as info:
        read_image(data)
    assert words in str(info.value)


def test_an_image_too_large_for_the_protocol(table):
    import dataclasses

    big = dataclasses.replace(table, y=np.full(5000, 65535, dtype=np.int64))   # about 30 kB of JSON
    with pytest.raises(ImageError) as info:
        table_image(big)
    assert str(MAX_IMAGE_BYTES) in str(info.value)
