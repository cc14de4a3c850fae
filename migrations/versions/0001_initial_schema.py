"""initial schema: artifacts, datasets, jobs and attempts, experiments, results, tokens

Revision ID: 0001
Revises:
Create Date: 2026-12-01

"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision: str = "0001"
down_revision: str | Sequence[str] | None = None
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

JSON = sa.JSON().with_variant(postgresql.JSONB(), "postgresql")


def ts(name: str, nullable: bool = False) -> sa.Column:
    """A timestamp column: naive UTC (see app.store.models.UTCDateTime)."""
    return sa.Column(name, sa.DateTime(timezone=False), nullable=nullable)


def upgrade() -> None:
    op.create_table(
        "artifacts",
        sa.Column("sha256", sa.String(64), nullable=False),
        sa.Column("size_bytes", sa.BigInteger(), nullable=False),
        sa.Column("media_type", sa.String(100), nullable=False),
        ts("created_at"),
        sa.PrimaryKeyConstraint("sha256", name=op.f("pk_artifacts")),
    )
    op.create_table(
        "jobs",
        sa.Column("id", sa.String(32), nullable=False),
        sa.Column("kind", sa.String(20), nullable=False),
        sa.Column("status", sa.String(10), nullable=False),
        sa.Column("payload", JSON, nullable=False),
        sa.Column("progress", sa.Float(), nullable=False),
        sa.Column("message", sa.Text(), nullable=True),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("max_attempts", sa.Integer(), nullable=False),
        sa.Column("owner_token", sa.String(64), nullable=True),
        sa.Column("worker", sa.String(200), nullable=True),
        ts("lease_expires_at", nullable=True),
        ts("heartbeat_at", nullable=True),
        ts("available_at"),
        ts("created_at"),
        ts("started_at", nullable=True),
        ts("finished_at", nullable=True),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_jobs")),
    )
    op.create_index("ix_jobs_status_available", "jobs", ["status", "available_at"])
    op.create_index("ix_jobs_status_lease", "jobs", ["status", "lease_expires_at"])

    op.create_table(
        "tokens",
        sa.Column("id", sa.String(32), nullable=False),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("scope", sa.String(10), nullable=False),
        sa.Column("prefix", sa.String(20), nullable=False),
        sa.Column("token_hash", sa.String(64), nullable=False),
        ts("created_at"),
        ts("last_used_at", nullable=True),
        ts("revoked_at", nullable=True),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_tokens")),
        sa.UniqueConstraint("token_hash", name=op.f("uq_tokens_token_hash")),
    )
    op.create_index(op.f("ix_tokens_prefix"), "tokens", ["prefix"])

    op.create_table(
        "cached_artifacts",
        sa.Column("key", sa.String(400), nullable=False),
        sa.Column("artifact_sha256", sa.String(64), nullable=False),
        sa.Column("media_type", sa.String(100), nullable=False),
        ts("created_at"),
        sa.ForeignKeyConstraint(
            ["artifact_sha256"],
            ["artifacts.sha256"],
            name=op.f("fk_cached_artifacts_artifact_sha256_artifacts"),
        ),
        sa.PrimaryKeyConstraint("key", name=op.f("pk_cached_artifacts")),
    )
    op.create_table(
        "datasets",
        sa.Column("id", sa.String(32), nullable=False),
        sa.Column("sha256", sa.String(64), nullable=False),
        sa.Column("role", sa.String(20), nullable=False),
        sa.Column("source", sa.String(10), nullable=False),
        sa.Column("artifact_sha256", sa.String(64), nullable=True),
        sa.Column("uri", sa.Text(), nullable=True),
        sa.Column("filename", sa.String(255), nullable=True),
        sa.Column("size_bytes", sa.BigInteger(), nullable=False),
        sa.Column("description", JSON, nullable=False),
        ts("created_at"),
        sa.ForeignKeyConstraint(
            ["artifact_sha256"],
            ["artifacts.sha256"],
            name=op.f("fk_datasets_artifact_sha256_artifacts"),
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_datasets")),
        sa.UniqueConstraint("sha256", name=op.f("uq_datasets_sha256")),
    )
    op.create_table(
        "job_attempts",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("job_id", sa.String(32), nullable=False),
        sa.Column("attempt", sa.Integer(), nullable=False),
        sa.Column("owner_token", sa.String(64), nullable=False),
        sa.Column("worker", sa.String(200), nullable=False),
        ts("claimed_at"),
        ts("lease_expires_at"),
        ts("ended_at", nullable=True),
        sa.Column("outcome", sa.String(10), nullable=True),
        sa.Column("error", sa.Text(), nullable=True),
        sa.ForeignKeyConstraint(
            ["job_id"], ["jobs.id"], name=op.f("fk_job_attempts_job_id_jobs"), ondelete="CASCADE"
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_job_attempts")),
        sa.UniqueConstraint("job_id", "attempt", name=op.f("uq_job_attempts_job_id")),
    )
    op.create_index(op.f("ix_job_attempts_job_id"), "job_attempts", ["job_id"])

    op.create_table(
        "experiments",
        sa.Column("id", sa.String(32), nullable=False),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("variable", sa.String(100), nullable=True),
        sa.Column("realistic_id", sa.String(32), nullable=False),
        sa.Column("scrambled_id", sa.String(32), nullable=False),
        sa.Column("observations_id", sa.String(32), nullable=False),
        sa.Column("land_state_id", sa.String(32), nullable=True),
        sa.Column("options", JSON, nullable=False),
        sa.Column("parameters", JSON, nullable=False),
        sa.Column("provenance", JSON, nullable=True),
        sa.Column("result_digest", sa.String(64), nullable=True),
        sa.Column("job_id", sa.String(32), nullable=False),
        ts("created_at"),
        ts("finished_at", nullable=True),
        sa.ForeignKeyConstraint(["job_id"], ["jobs.id"], name=op.f("fk_experiments_job_id_jobs")),
        *[
            sa.ForeignKeyConstraint(
                [f"{slot}_id"], ["datasets.id"], name=op.f(f"fk_experiments_{slot}_id_datasets")
            )
            for slot in ("land_state", "observations", "realistic", "scrambled")
        ],
        sa.PrimaryKeyConstraint("id", name=op.f("pk_experiments")),
        sa.UniqueConstraint("job_id", name=op.f("uq_experiments_job_id")),
    )
    op.create_index(op.f("ix_experiments_name"), "experiments", ["name"])
    op.create_index(op.f("ix_experiments_variable"), "experiments", ["variable"])

    op.create_table(
        "comparisons",
        sa.Column("id", sa.String(32), nullable=False),
        sa.Column("baseline_id", sa.String(32), nullable=False),
        sa.Column("candidate_id", sa.String(32), nullable=False),
        sa.Column("parameters", JSON, nullable=False),
        sa.Column("job_id", sa.String(32), nullable=False),
        sa.Column("result_sha256", sa.String(64), nullable=True),
        ts("created_at"),
        ts("finished_at", nullable=True),
        sa.ForeignKeyConstraint(
            ["baseline_id"], ["experiments.id"], name=op.f("fk_comparisons_baseline_id_experiments")
        ),
        sa.ForeignKeyConstraint(
            ["candidate_id"],
            ["experiments.id"],
            name=op.f("fk_comparisons_candidate_id_experiments"),
        ),
        sa.ForeignKeyConstraint(["job_id"], ["jobs.id"], name=op.f("fk_comparisons_job_id_jobs")),
        sa.ForeignKeyConstraint(
            ["result_sha256"],
            ["artifacts.sha256"],
            name=op.f("fk_comparisons_result_sha256_artifacts"),
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_comparisons")),
        sa.UniqueConstraint("job_id", name=op.f("uq_comparisons_job_id")),
    )
    op.create_table(
        "result_files",
        sa.Column("experiment_id", sa.String(32), nullable=False),
        sa.Column("name", sa.String(100), nullable=False),
        sa.Column("artifact_sha256", sa.String(64), nullable=False),
        sa.ForeignKeyConstraint(
            ["artifact_sha256"],
            ["artifacts.sha256"],
            name=op.f("fk_result_files_artifact_sha256_artifacts"),
        ),
        sa.ForeignKeyConstraint(
            ["experiment_id"],
            ["experiments.id"],
            name=op.f("fk_result_files_experiment_id_experiments"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("experiment_id", "name", name=op.f("pk_result_files")),
    )


def downgrade() -> None:
    op.drop_table("result_files")
    op.drop_table("comparisons")
    op.drop_index(op.f("ix_experiments_variable"), table_name="experiments")
    op.drop_index(op.f("ix_experiments_name"), table_name="experiments")
    op.drop_table("experiments")
    op.drop_index(op.f("ix_job_attempts_job_id"), table_name="job_attempts")
    op.drop_table("job_attempts")
    op.drop_table("datasets")
    op.drop_table("cached_artifacts")
    op.drop_index(op.f("ix_tokens_prefix"), table_name="tokens")
    op.drop_table("tokens")
    op.drop_index("ix_jobs_status_lease", table_name="jobs")
    op.drop_index("ix_jobs_status_available", table_name="jobs")
    op.drop_table("jobs")
    op.drop_table("artifacts")
