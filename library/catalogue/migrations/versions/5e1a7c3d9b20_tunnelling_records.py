"""Tunnelling records: computed_record.kind may be 'tunnelling' (the receptor model beside the vibration record).

Revision ID: 5e1a7c3d9b20
Revises: 862b46cd7195
Create Date: 2026-12-03 07:50:00
"""
from alembic import op


revision = '5e1a7c3d9b20'
down_revision = '862b46cd7195'
branch_labels = None
depends_on = None


def _kind_check(batch_op, kinds: str) -> None:
    batch_op.drop_constraint(op.f('ck_computed_record_kind'), type_='check')
    batch_op.create_check_constraint('kind', f"kind IN ({kinds})")


def upgrade() -> None:
    with op.batch_alter_table('computed_record', schema=None) as batch_op:
        _kind_check(batch_op, "'shape', 'vibration', 'tunnelling'")


def downgrade() -> None:
    op.execute("DELETE FROM computed_array WHERE record_id IN "
               "(SELECT id FROM computed_record WHERE kind = 'tunnelling')")
    op.execute("DELETE FROM computed_record WHERE kind = 'tunnelling'")
    with op.batch_alter_table('computed_record', schema=None) as batch_op:
        _kind_check(batch_op, "'shape', 'vibration'")
