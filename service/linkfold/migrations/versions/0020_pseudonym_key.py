"""the fingerprint of the key units are pseudonymised under

``pseudonym_keys`` holds one row (``name`` = ``units``) once a load has stored units: the scheme and a
fingerprint of the lab's ``pseudonym_key`` (an HMAC of a fixed label under the key, never the key itself;
linkfold/pseudonyms.py). A later load under a different key is refused, so one person never gets two
pseudonyms in one registry without anyone noticing.

Revision ID: 0020
Revises: 0013
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0020"
down_revision = "0013"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "pseudonym_keys",
        sa.Column("name", sa.String(40), nullable=False),
        sa.Column("scheme", sa.String(20), nullable=False),
        sa.Column("fingerprint", sa.String(64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("name", name=op.f("pk_pseudonym_keys")),
    )


def downgrade() -> None:
    op.drop_table("pseudonym_keys")
