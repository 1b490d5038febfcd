"""Curator data: base presets stored in the catalogue, and the components of recorded mixtures.

Revision ID: 7b3e9f5a2c48
Revises: 6a2d8e4f1c37
Create Date: 2026-12-03 14:35:00
"""
import sqlalchemy as sa
from alembic import op


revision = '7b3e9f5a2c48'
down_revision = '6a2d8e4f1c37'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        'base_preset',
        sa.Column('id', sa.Integer(), nullable=False),
        sa.Column('name', sa.String(length=60), nullable=False),
        sa.Column('groups_json', sa.Text(), nullable=False),
        sa.Column('why', sa.Text(), nullable=True),
        sa.Column('source', sa.String(length=500), nullable=False),
        sa.Column('updated_by', sa.String(length=100), nullable=False),
        sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint('id', name=op.f('pk_base_preset')),
        sa.UniqueConstraint('name', name=op.f('uq_base_preset_name')),
    )
    op.create_table(
        'material_component',
        sa.Column('id', sa.Integer(), nullable=False),
        sa.Column('mixture_id', sa.Integer(), nullable=False),
        sa.Column('component_id', sa.Integer(), nullable=False),
        sa.CheckConstraint('mixture_id <> component_id', name=op.f('ck_material_component_not_itself')),
        sa.ForeignKeyConstraint(['mixture_id'], ['material.id'],
                                name=op.f('fk_material_component_mixture_id_material'), ondelete='CASCADE'),
        sa.ForeignKeyConstraint(['component_id'], ['material.id'],
                                name=op.f('fk_material_component_component_id_material'), ondelete='CASCADE'),
        sa.PrimaryKeyConstraint('id', name=op.f('pk_material_component')),
        sa.UniqueConstraint('mixture_id', 'component_id', name='uq_material_component_pair'),
    )
    with op.batch_alter_table('material_component', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_material_component_mixture_id'), ['mixture_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_material_component_component_id'), ['component_id'], unique=False)


def downgrade() -> None:
    with op.batch_alter_table('material_component', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_material_component_component_id'))
        batch_op.drop_index(batch_op.f('ix_material_component_mixture_id'))
    op.drop_table('material_component')
    op.drop_table('base_preset')
