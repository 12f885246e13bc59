"""The C client's built-in mock cluster as the reference of the ``librdkafka`` rule: the partition of every message
that ``confluent-kafka``'s Producer delivers to it.

The topic must exist with its partition count *before* the first message, or the producer writes to an
auto-created topic with the mock's default count. ``AdminClient.create_topics`` cannot create it here: the mock's
metadata names controller 0, which is none of its brokers (ids from 1), and the request waits for a controller
until it times out. So the cluster is started and its topics created through the mock's own C API
(``rd_kafka_mock_cluster_new``, ``rd_kafka_mock_topic_create`` in ``rdkafka_mock.h``) on the very ``librdkafka``
the package bundles, loaded with ``ctypes``; the Producer then connects to it like to any cluster.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import glob
import os
from collections.abc import Sequence

import pytest

confluent_kafka = pytest.importorskip("confluent_kafka", reason="confluent-kafka is the reference")


def _bundled_library() -> ctypes.CDLL:
    """The ``librdkafka`` shipped inside the confluent-kafka wheel (else the system's)."""
    package = os.path.dirname(confluent_kafka.__file__)
    patterns = [
        os.path.join(os.path.dirname(package), "confluent_kafka.libs", "librdkafka*"),  # Linux wheels
        os.path.join(package, ".dylibs", "librdkafka*"),  # macOS wheels
    ]
    found = sorted(p for pattern in patterns for p in glob.glob(pattern))
    path = found[0] if found else ctypes.util.find_library("rdkafka")
    if path is None:
        pytest.skip("librdkafka's library file was not found beside confluent-kafka")
    lib = ctypes.CDLL(path)
    voidp, charp = ctypes.c_void_p, ctypes.c_char_p
    lib.rd_kafka_conf_new.restype = voidp
    lib.rd_kafka_new.restype = voidp
    lib.rd_kafka_new.argtypes = [ctypes.c_int, voidp, charp, ctypes.c_size_t]
    lib.rd_kafka_mock_cluster_new.restype = voidp
    lib.rd_kafka_mock_cluster_new.argtypes = [voidp, ctypes.c_int]
    lib.rd_kafka_mock_cluster_bootstraps.restype = charp
    lib.rd_kafka_mock_cluster_bootstraps.argtypes = [voidp]
    lib.rd_kafka_mock_topic_create.restype = ctypes.c_int
    lib.rd_kafka_mock_topic_create.argtypes = [voidp, charp, ctypes.c_int, ctypes.c_int]
    lib.rd_kafka_mock_cluster_destroy.argtypes = [voidp]
    lib.rd_kafka_destroy.argtypes = [voidp]
    return lib


class MockCluster:
    """A one-broker mock cluster with a topic ``p<N>`` of N partitions for every N asked for."""

    def __init__(self) -> None:
        self._lib = _bundled_library()
        errors = ctypes.create_string_buffer(512)
        self._owner = self._lib.rd_kafka_new(0, self._lib.rd_kafka_conf_new(), errors, len(errors))  # a producer
        if not self._owner:
            raise RuntimeError(errors.value.decode())
        self._cluster = self._lib.rd_kafka_mock_cluster_new(self._owner, 1)
        self.bootstrap = self._lib.rd_kafka_mock_cluster_bootstraps(self._cluster).decode()
        self._topics: set[int] = set()

    def topic(self, partitions: int) -> str:
        """The topic with ``partitions`` partitions (created on first use)."""
        if partitions not in self._topics:
            code = self._lib.rd_kafka_mock_topic_create(self._cluster, f"p{partitions}".encode(), partitions, 1)
            assert code == 0, f"rd_kafka_mock_topic_create returned {code}"
            self._topics.add(partitions)
        return f"p{partitions}"

    def partitions_of(
        self, keys: Sequence[bytes | None], partitions: int, partitioner: str, sticky_ms: int = 10
    ) -> list[int]:
        """The partition of every delivered message, keyed by ``keys`` (``None``: a null key), in order.

        ``sticky_ms`` is the producer's ``sticky.partitioning.linger.ms``: 0 draws a random partition for every
        message the partitioner sends at random (null keys; empty keys under ``consistent_random``)."""
        topic = self.topic(partitions)
        producer = confluent_kafka.Producer(
            {
                "bootstrap.servers": self.bootstrap,
                "partitioner": partitioner,
                "sticky.partitioning.linger.ms": sticky_ms,
                "linger.ms": 5,
                "queue.buffering.max.messages": 1_000_000,
            }
        )
        placed: list[int] = [-1] * len(keys)
        failures: list[str] = []

        def delivered(error, message) -> None:  # type: ignore[no-untyped-def]
            if error is not None:
                failures.append(str(error))
            else:
                placed[int(message.value())] = message.partition()

        for i, key in enumerate(keys):
            while True:
                try:
                    producer.produce(topic, value=str(i).encode(), key=key, on_delivery=delivered)
                    break
                except BufferError:  # the local queue is full: serve delivery reports, then retry
                    producer.poll(0.05)
        remaining = producer.flush(60)
        assert remaining == 0 and not failures, (remaining, failures[:3])
        return placed

    def close(self) -> None:
        self._lib.rd_kafka_mock_cluster_destroy(self._cluster)
        self._lib.rd_kafka_destroy(self._owner)
