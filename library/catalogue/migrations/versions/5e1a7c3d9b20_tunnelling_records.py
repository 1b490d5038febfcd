"""Tunnelling records: computed_record.kind may be 'tunnelling' (the receptor model beside the vibration record).

Revision ID: 5e1a7c3d9b20
Revises: 5c1e0a7d2b94
Create Date: 2026-12-03 07:50:00
"""
from alembic import op


revision = '5e1a7c3d9b20'
down_revision = '5c1e0a7d2b94'
branch_labels = None
depends_on = None


def _kind_check(kinds: str) -> None:
    """Replace the kind check. SQLite rebuilds the table to do it, and dropping the old table would
    cascade to computed_array (ON DELETE CASCADE, foreign keys on): the arrays are kept aside and
    put back, so no record loses its arrays."""
    sqlite = op.get_bind().dialect.name == "sqlite"
    if sqlite:
        op.execute("CREATE TEMPORARY TABLE kept_computed_array AS SELECT * FROM computed_array")
    with op.batch_alter_table('computed_record', schema=None) as batch_op:
        batch_op.drop_constraint(op.f('ck_computed_record_kind'), type_='check')
        batch_op.create_check_constraint('kind', f"kind IN ({kinds})")
    if sqlite:
        op.execute("INSERT OR IGNORE INTO computed_array SELECT * FROM kept_computed_array "
                   "WHERE record_id IN (SELECT id FROM computed_record)")
        op.execute("DROP TABLE kept_computed_array")


def upgrade() -> None:
    _kind_check("'shape', 'vibration', 'tunnelling'")


def downgrade() -> None:
    op.execute("DELETE FROM computed_array WHERE record_id IN "
               "(SELECT id FROM computed_record WHERE kind = 'tunnelling')")
    op.execute("DELETE FROM computed_record WHERE kind = 'tunnelling'")
    _kind_check("'shape', 'vibration'")
