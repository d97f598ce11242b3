"""The crafted pickles of tests/support/pickle_bomb.py are live: loading them the unsafe way creates the
marker, so a test that finds the marker absent has shown that nothing unpickled them."""

import io
import pickle

import torch

from tests.support.pickle_bomb import pickle_bomb, torch_bomb


def test_plain_pickle_creates_the_marker_when_loaded(tmp_path):
    marker = tmp_path / "marker"
    pickle.loads(pickle_bomb(marker))
    assert marker.exists()


def test_torch_file_creates_the_marker_when_loaded_unsafely(tmp_path):
    marker = tmp_path / "marker"
    torch.load(io.BytesIO(torch_bomb(marker)), weights_only=False)
    assert marker.exists()
