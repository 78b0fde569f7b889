"""Settings, the Celery configuration, and the stored array format.

Sources: DEVELOPERS.md "Service contracts" for the DRAWYARD_* names and the Celery entry point;
Celery's documentation of task_acks_late, task_reject_on_worker_lost, worker_prefetch_multiplier
and the Redis transport's visibility_timeout (a message not acknowledged within it is delivered
again, so it must outlast the longest task); NumPy Enhancement Proposal 1, "A simple file format
for NumPy arrays" (the .npy magic string b"\\x93NUMPY" and the header's 'descr'); FIPS 180-4 for
SHA-256 (Python's hashlib).
"""

from __future__ import annotations

import hashlib
import io
import zlib

import numpy as np
import pytest

from service.config import load_settings
from service.store.arrays import decode_array, encode_array
from worker.celery_app import broker_options, make_celery


def test_environment_then_mapping_with_types() -> None:
    environ = {
        "DRAWYARD_MAX_CHAINS": "7",
        "DRAWYARD_PROGRESS_INTERVAL": "0.5",
        "DRAWYARD_DATABASE_URL": "sqlite:///from-env.sqlite",
    }
    settings = load_settings({"database_url": "sqlite:///given.sqlite"}, environ)
    assert settings.max_chains == 7 and settings.progress_interval == 0.5
    assert settings.database_url == "sqlite:///given.sqlite"
    assert load_settings({"DRAWYARD_MAX_DRAWS": 10}, {}).max_draws == 10
    with pytest.raises(ValueError, match="DRAWYARD_MAX_CHAINS"):
        load_settings(None, {"DRAWYARD_MAX_CHAINS": "many"})


def test_celery_is_json_only_late_acking_and_outlasts_the_longest_chain() -> None:
    settings = load_settings({"chain_time_limit": 7200, "broker_url": "redis://127.0.0.1:1/0"}, {})
    app = make_celery(settings)
    conf = app.conf
    assert conf.task_serializer == "json" and conf.result_serializer == "json"
    assert conf.accept_content == ["json"]
    assert conf.task_acks_late is True and conf.task_reject_on_worker_lost is True
    assert conf.worker_prefetch_multiplier == 1
    assert conf.broker_transport_options["visibility_timeout"] > 7200
    assert {"drawyard.run_chain", "drawyard.finish_job"} <= set(app.tasks)
    explicit = load_settings(
        {"redelivery_timeout": 5, "broker_library_options": '{"unacked_restore_interval": 1}'}, {}
    )
    _, options = broker_options(explicit)
    assert options == {"visibility_timeout": 5, "unacked_restore_interval": 1}


def test_filesystem_broker_uses_one_folder_both_ways(tmp_path) -> None:
    settings = load_settings({"broker_url": "filesystem://", "broker_folder": str(tmp_path)}, {})
    url, options = broker_options(settings)
    assert url == "filesystem://"
    assert options["data_folder_in"] == options["data_folder_out"]
    assert (tmp_path / "queue").is_dir()


@pytest.mark.parametrize(
    "values",
    [
        np.random.default_rng(4).normal(size=(500, 3)),
        np.array([[np.nan, np.inf], [-np.inf, -0.0]]),
        np.arange(12, dtype=">i8").reshape(3, 4),  # big-endian in, little-endian stored
        np.array([True, False, True]),
    ],
)
def test_arrays_round_trip_exactly_as_little_endian_npy(values: np.ndarray) -> None:
    encoded = encode_array(values)
    raw = zlib.decompress(encoded.data)
    assert raw.startswith(b"\x93NUMPY")  # NEP 1 magic string
    assert encoded.dtype in ("<f8", "<i8", "|b1") and encoded.shape == list(values.shape)
    little = np.ascontiguousarray(values, dtype=values.dtype.newbyteorder("<"))
    assert encoded.sha256 == hashlib.sha256(little.tobytes()).hexdigest()
    back = decode_array(encoded.data, encoded.sha256)
    assert back.tobytes() == little.tobytes() and back.shape == values.shape


def test_a_corrupted_array_is_refused() -> None:
    encoded = encode_array(np.ones(4))
    tampered = np.load(io.BytesIO(zlib.decompress(encoded.data)))
    tampered[2] = 2.0
    other = encode_array(tampered)
    with pytest.raises(ValueError, match="corrupt"):
        decode_array(other.data, encoded.sha256)
