"""Migration 0008: jobs stored before keep digests that verify under their recorded scheme;
chains get a warm-up divergence count of their own; the registry's digests move to RFC 8785.
Checked on SQLite and PostgreSQL (the unmigrated_url fixture)."""

from __future__ import annotations

import hashlib
import json

from sqlalchemy import create_engine, text

from service.canonical import JCS, SORTED_KEYS, canonical_json
from service.store import migrate
from service.store.engine import make_engine
from tests.service.store_probe import store_at_revision_with_a_job

# Numbers whose text differs between the two schemes (1e-07 against 1e-7), so a digest taken
# under one does not verify under the other.
SPEC = {"title": "scale 1e-7", "unknowns": {"mu": {}}, "priors": [{"scale": 1e-7}]}


def test_older_jobs_keep_verifiable_digests_under_their_scheme(unmigrated_url: str) -> None:
    job_id = store_at_revision_with_a_job(unmigrated_url, "0007")
    old_digest = hashlib.sha256(canonical_json(SPEC, SORTED_KEYS)).hexdigest()
    engine = make_engine(unmigrated_url)
    with engine.begin() as connection:
        connection.execute(
            text("UPDATE jobs SET body = :body, spec_sha256 = :h WHERE id = :id"),
            {"body": json.dumps({"model": SPEC}), "h": old_digest, "id": job_id},
        )
        connection.execute(
            text(
                "INSERT INTO chains (job_id, chain_index, state, attempts, duplicate_deliveries, "
                "iteration, iterations_total, divergences, updated_at) VALUES "
                "(:id, 0, 'succeeded', 1, 0, 20, 20, 3, CURRENT_TIMESTAMP)"
            ),
            {"id": job_id},
        )
        connection.execute(
            text(
                "INSERT INTO model_versions (tenant, name, version, spec_sha256, spec, "
                "created_at) VALUES ('', 'scaled', 1, :h, :spec, CURRENT_TIMESTAMP)"
            ),
            {"h": old_digest, "spec": json.dumps(SPEC)},
        )
    engine.dispose()
    migrate(unmigrated_url)
    engine = create_engine(unmigrated_url)
    try:
        with engine.connect() as connection:
            scheme, body, digest, request_body = connection.execute(
                text("SELECT digest_scheme, body, spec_sha256, request_body FROM jobs "
                     "WHERE id = :id"),
                {"id": job_id},
            ).one()  # fmt: skip
            chain = connection.execute(
                text("SELECT divergences, warmup_divergences FROM chains WHERE job_id = :id"),
                {"id": job_id},
            ).one()
            registered = connection.execute(
                text("SELECT spec_sha256 FROM model_versions WHERE name = 'scaled'")
            ).scalar()
    finally:
        engine.dispose()
    spec = (json.loads(body) if isinstance(body, str) else body)["model"]
    assert scheme == SORTED_KEYS
    assert hashlib.sha256(canonical_json(spec, scheme)).hexdigest() == digest == old_digest
    assert hashlib.sha256(canonical_json(spec, JCS)).hexdigest() != digest
    assert request_body is None
    assert tuple(chain) == (3, None)
    assert registered == hashlib.sha256(canonical_json(SPEC, JCS)).hexdigest()
