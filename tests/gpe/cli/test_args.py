"""Argument helpers of the command line: seed lists and frame selectors."""

import pytest

from gpe.cli.args import parse_frames, parse_seeds
from gpe.errors import VorthermError


def test_seed_ranges_and_lists():
    assert parse_seeds("1-4") == [1, 2, 3, 4]
    assert parse_seeds("3,7,9") == [3, 7, 9]
    assert parse_seeds("1-2,5") == [1, 2, 5]
    for bad in ("one", "1-x", ""):
        with pytest.raises(VorthermError, match="--seeds"):
            parse_seeds(bad)


def test_frame_selectors():
    assert parse_frames(None) is None
    assert parse_frames("10:40") == slice(10, 40)
    assert parse_frames(":5") == slice(None, 5)
    assert parse_frames("5,9,-1") == [5, 9, -1]
    with pytest.raises(VorthermError, match="--frames"):
        parse_frames("a,b")
