"""Checkpoint round trips, refusal of pickled content, and safety when the disk fills up."""

import errno
import os
import zipfile

import numpy as np
import pytest

from beadsim.errors import CheckpointError, InputError
from beadsim.io import checkpoint as checkpoint_module
from beadsim.io.checkpoint import META_KEY, read_checkpoint, write_checkpoint


@pytest.fixture
def state():
    rng = np.random.default_rng(20240611)
    arrays = {
        "positions": rng.normal(size=(12, 3)),
        "velocities": rng.normal(size=(12, 3)),
        "bead_types": np.arange(12, dtype=np.int32) % 2,
    }
    generator = np.random.default_rng(7)
    meta = {"step": 1500, "time": 7.5, "dt": 0.005, "rng_state": generator.bit_generator.state,
            "trajectory_frames": np.int64(16), "temperature": np.float64(1.0) / 3.0}
    return arrays, meta


def test_round_trip_keeps_arrays_bit_identical_and_meta(tmp_path, state):
    arrays, meta = state
    path = tmp_path / "run.npz"
    write_checkpoint(path, arrays, meta)
    back, back_meta = read_checkpoint(path)
    assert set(back) == set(arrays)
    for name, value in arrays.items():
        assert back[name].dtype == value.dtype
        np.testing.assert_array_equal(back[name], value)
    assert back_meta["step"] == 1500
    assert back_meta["trajectory_frames"] == 16
    assert back_meta["temperature"] == 1.0 / 3.0  # exact: JSON keeps repr-level floats
    assert back_meta["rng_state"] == meta["rng_state"]


def test_restored_generator_state_continues_the_same_stream(tmp_path):
    rng = np.random.default_rng(99)
    rng.normal(size=5)
    write_checkpoint(tmp_path / "c.npz", {}, {"rng_state": rng.bit_generator.state})
    expected = rng.normal(size=4)
    _, meta = read_checkpoint(tmp_path / "c.npz")
    restored = np.random.default_rng()
    restored.bit_generator.state = meta["rng_state"]
    np.testing.assert_array_equal(restored.normal(size=4), expected)


def test_metadata_is_stored_as_text_not_as_an_object(tmp_path, state):
    path = tmp_path / "run.npz"
    write_checkpoint(path, *state)
    # numpy itself (reference reader) loads it without pickle support
    with np.load(path, allow_pickle=False) as archive:
        assert archive[META_KEY].dtype.kind == "U"


def test_pickled_object_is_refused_without_running_code(tmp_path):
    marker = tmp_path / "code_ran"

    class RunsCodeWhenUnpickled:
        def __reduce__(self):
            return (open, (str(marker), "w"))

    path = tmp_path / "evil.npz"
    np.savez(path, payload=np.array([RunsCodeWhenUnpickled()], dtype=object), meta_json=np.array("{}"))
    with pytest.raises(CheckpointError, match="evil.npz.*pickled"):
        read_checkpoint(path)
    assert not marker.exists()


def test_object_arrays_are_refused_when_writing(tmp_path):
    with pytest.raises(InputError, match="object"):
        write_checkpoint(tmp_path / "c.npz", {"bad": np.array([{"a": 1}], dtype=object)}, {})
    assert not (tmp_path / "c.npz").exists()


@pytest.mark.parametrize("arrays, meta, message", [
    ({META_KEY: np.zeros(2)}, {}, "reserved"),
    ({"positions": np.zeros(2)}, {"bad": {1, 2}}, "JSON"),
    ({"not an identifier": np.zeros(2)}, {}, "identifiers"),
    ([np.zeros(2)], {}, "dict"),
])
def test_invalid_content_is_refused(tmp_path, arrays, meta, message):
    with pytest.raises(InputError, match=message):
        write_checkpoint(tmp_path / "c.npz", arrays, meta)


@pytest.mark.parametrize("keep_bytes", [0, 10, 200])
def test_truncated_file_gives_clear_error(tmp_path, state, keep_bytes):
    path = tmp_path / "run.npz"
    write_checkpoint(path, *state)
    data = path.read_bytes()
    path.write_bytes(data[:keep_bytes])
    with pytest.raises(CheckpointError, match="run.npz"):
        read_checkpoint(path)


def test_missing_file_and_missing_metadata_give_clear_errors(tmp_path):
    with pytest.raises(CheckpointError, match="does not exist"):
        read_checkpoint(tmp_path / "absent.npz")
    np.savez(tmp_path / "plain.npz", positions=np.zeros((2, 3)))
    with pytest.raises(CheckpointError, match="plain.npz.*meta_json"):
        read_checkpoint(tmp_path / "plain.npz")


def test_corrupted_member_gives_clear_error(tmp_path, state):
    path = tmp_path / "run.npz"
    write_checkpoint(path, *state)
    data = bytearray(path.read_bytes())
    offset = data.index(b"positions.npy") + 200  # inside the stored array bytes
    data[offset:offset + 8] = b"\xff" * 8
    path.write_bytes(bytes(data))
    with pytest.raises(CheckpointError, match="run.npz"):
        read_checkpoint(path)


def _disk_full_after_partial_write(file, **arrays):
    file.write(b"PK\x03\x04 partial")
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


def test_disk_full_keeps_previous_checkpoint_and_removes_temporary(tmp_path, state, monkeypatch):
    path = tmp_path / "run.npz"
    write_checkpoint(path, *state)
    before = path.read_bytes()
    monkeypatch.setattr(checkpoint_module.np, "savez", _disk_full_after_partial_write)
    with pytest.raises(CheckpointError, match=r"run\.npz.*No space left") as info:
        write_checkpoint(path, {"positions": np.ones((12, 3))}, {"step": 3000})
    assert info.value.__cause__.errno == errno.ENOSPC
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run.npz"]
    monkeypatch.undo()
    arrays, meta = read_checkpoint(path)
    assert meta["step"] == 1500


def test_disk_full_during_fsync_keeps_previous_checkpoint(tmp_path, state, monkeypatch):
    path = tmp_path / "run.npz"
    write_checkpoint(path, *state)
    before = path.read_bytes()

    def fsync_fails(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "fsync", fsync_fails)
    with pytest.raises(CheckpointError, match="run.npz"):
        write_checkpoint(path, {"positions": np.ones((12, 3))}, {"step": 3000})
    monkeypatch.undo()
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run.npz"]


def test_written_file_is_a_standard_zip_archive(tmp_path, state):
    path = tmp_path / "run.npz"
    write_checkpoint(path, *state)
    # reference: the standard library's zip reader validates every member's CRC
    with zipfile.ZipFile(path) as archive:
        assert archive.testzip() is None
        assert sorted(archive.namelist()) == sorted(f"{k}.npy" for k in [*state[0], META_KEY])
