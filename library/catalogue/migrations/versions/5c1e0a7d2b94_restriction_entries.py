"""Restriction entries per material (prohibited, restricted with a maximum level, specification, allergen);
materials flagged restricted before get one entry saying so.

Revision ID: 5c1e0a7d2b94
Revises: 5b1e0c7a9d21
Create Date: 2026-12-03 07:45:00
"""
from alembic import op
import sqlalchemy as sa


revision = '5c1e0a7d2b94'
down_revision = '5b1e0c7a9d21'
branch_labels = None
depends_on = None

CARRIED_OVER = "carried over from the former restricted flag"


def upgrade() -> None:
    op.create_table(
        'restriction',
        sa.Column('id', sa.Integer(), nullable=False),
        sa.Column('material_id', sa.Integer(), nullable=False),
        sa.Column('kind', sa.String(length=20), nullable=False),
        sa.Column('max_percent', sa.Float(), nullable=True),
        sa.Column('product_category', sa.String(length=200), nullable=True),
        sa.Column('authority', sa.String(length=200), nullable=False),
        sa.Column('reference', sa.Text(), nullable=True),
        sa.Column('decided_on', sa.Date(), nullable=True),
        sa.Column('source_kind', sa.String(length=20), nullable=False),
        sa.Column('source_reference', sa.Text(), nullable=True),
        sa.CheckConstraint("kind IN ('prohibited', 'restricted', 'specification', 'allergen')",
                           name=op.f('ck_restriction_kind')),
        sa.CheckConstraint("source_kind IN ('measured', 'literature', 'from memory', 'computed', 'demo')",
                           name=op.f('ck_restriction_source_kind')),
        sa.CheckConstraint("max_percent IS NULL OR (max_percent >= 0 AND max_percent <= 100)",
                           name=op.f('ck_restriction_max_percent')),
        sa.ForeignKeyConstraint(['material_id'], ['material.id'], name=op.f('fk_restriction_material_id_material'),
                                ondelete='CASCADE'),
        sa.PrimaryKeyConstraint('id', name=op.f('pk_restriction')),
    )
    with op.batch_alter_table('restriction', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_restriction_material_id'), ['material_id'], unique=False)
    op.execute(
        "INSERT INTO restriction (material_id, kind, authority, source_kind, source_reference) "
        f"SELECT id, 'restricted', 'not recorded', 'from memory', '{CARRIED_OVER}' "
        "FROM material WHERE restricted")


def downgrade() -> None:
    # the flag keeps what the entries said: restricted if any prohibited or restricted entry
    op.execute("UPDATE material SET restricted = EXISTS (SELECT 1 FROM restriction r "
               "WHERE r.material_id = material.id AND r.kind IN ('prohibited', 'restricted'))")
    with op.batch_alter_table('restriction', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_restriction_material_id'))
    op.drop_table('restriction')
