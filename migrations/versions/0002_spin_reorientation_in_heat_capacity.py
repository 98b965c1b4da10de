"""troilite's spin reorientation is revealed by heat-capacity runs too

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-03 03:05:00

The seeded catalogue row of ``spin-reorientation`` did not list calorimetry
among the run kinds that reveal it, so a heat-capacity anomaly near 410-450 K
stayed unassigned.  Only the seeded row is changed, and only when a lab has
not edited its run kinds to leave calorimetry out deliberately (it then still
lacks it, which this cannot tell apart: the row is updated either way, and
downgrading removes calorimetry again).
"""
from __future__ import annotations

import json

from alembic import op
import sqlalchemy as sa

revision = '0002'
down_revision = '0001'
branch_labels = None
depends_on = None

KIND = "spin-reorientation"
RUN_KIND = "calorimetry"

_table = sa.table("transition_kind", sa.column("id", sa.String), sa.column("run_kinds", sa.JSON),
                  sa.column("seeded", sa.Boolean))


def _change(add: bool) -> None:
    bind = op.get_bind()
    row = bind.execute(sa.select(_table.c.run_kinds)
                       .where(_table.c.id == KIND, _table.c.seeded.is_(True))).first()
    if row is None:
        return
    kinds = row[0] if isinstance(row[0], list) else json.loads(row[0])
    if add and RUN_KIND not in kinds:
        kinds = [*kinds, RUN_KIND]
    elif not add:
        kinds = [k for k in kinds if k != RUN_KIND]
    bind.execute(sa.update(_table).where(_table.c.id == KIND).values(run_kinds=kinds))


def upgrade() -> None:
    _change(add=True)


def downgrade() -> None:
    _change(add=False)
