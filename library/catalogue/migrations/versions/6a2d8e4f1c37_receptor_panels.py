"""Receptor panels: a user's named lists of receptor gaps (and reorganization energies).

Revision ID: 6a2d8e4f1c37
Revises: 5e1a7c3d9b20
Create Date: 2026-12-03 14:20:00
"""
import sqlalchemy as sa
from alembic import op


revision = '6a2d8e4f1c37'
down_revision = '5e1a7c3d9b20'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('receptor_panel',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=60), nullable=False),
    sa.Column('receptors_json', sa.Text(), nullable=False),
    sa.Column('note', sa.Text(), nullable=True),
    sa.Column('created_by', sa.String(length=100), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_receptor_panel')),
    sa.UniqueConstraint('name', name=op.f('uq_receptor_panel_name'))
    )


def downgrade() -> None:
    op.drop_table('receptor_panel')
