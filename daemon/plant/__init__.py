"""The plant store: every station's records in one PostgreSQL (see docs/plant.md).

``migrations`` lays and upgrades the schema, ``writer`` stores station messages idempotently,
``payloads`` checks them first, ``queries`` answers the plant's questions. psycopg is imported
only when a connection is made, so nothing here slows a station that never talks to the plant.
"""
