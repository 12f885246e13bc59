"""Placement rules of widely deployed systems, reproduced bit for bit as batch kernels.

Each module reproduces how one system turns a key into a partition, a slot or a bucket, so that an audit
sees the keys exactly as that system spreads them:

- :mod:`hashaudit.placements.kafka`: the message broker's JVM client, ``Utils.murmur2`` and the default
  partitioner for keyed records.
- :mod:`hashaudit.placements.librdkafka`: the C client's partitioners (``consistent_random``, ``murmur2_random``,
  ``fnv1a_random``).
- :mod:`hashaudit.placements.agreement`: two rules compared key by key (the ``placement_agreement`` fact).
- :mod:`hashaudit.placements.redis_cluster`: the cluster's hash-tag rule, CRC16 and its 16384 hash slots.
- :mod:`hashaudit.placements.jvm`: ``java.lang.String.hashCode`` of UTF-8 keys, the ``Math.abs(h % n)``
  selector and ``java.util.HashMap``'s spread and bucket index; :mod:`hashaudit.placements.java_hashmap`: the
  map's table size after its puts.
- :mod:`hashaudit.placements.cassandra`: the Murmur3Partitioner's token and a ring of random tokens per node.
- :mod:`hashaudit.placements.ketama`: the memcached clients' MD5 ring (:mod:`hashaudit.placements._md5`: MD5 as a
  batch kernel).
- :mod:`hashaudit.placements.postgres`: PostgreSQL's ``hash_bytes_extended`` and hash partitioning.
- :mod:`hashaudit.placements.python_dict`: CPython's str hash (SipHash-1-3 keyed by the hash secret) and a dict's
  table.
- :mod:`hashaudit.placements.rules`: the registry of rules with their parameters and the layouts mapping hash
  values to units.

The package imports nothing itself, so that importing it does not load numba; import the module you need.
"""
