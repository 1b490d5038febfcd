"""Pair classes and calibrated metrics: user reaction-SMARTS pair classes, learned blend weights.

Revision ID: 5b1e0c7a9d21
Revises: 862b46cd7195
Create Date: 2026-12-03 07:45:00
"""
from alembic import op
import sqlalchemy as sa


revision = '5b1e0c7a9d21'
down_revision = '862b46cd7195'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('pair_class',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=60), nullable=False),
    sa.Column('reaction_smarts', sa.Text(), nullable=False),
    sa.Column('description', sa.Text(), nullable=True),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_pair_class')),
    sa.UniqueConstraint('name', name=op.f('uq_pair_class_name'))
    )
    op.create_table('calibrated_metric',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=60), nullable=False),
    sa.Column('weights_json', sa.Text(), nullable=False),
    sa.Column('observed_source', sa.String(length=100), nullable=False),
    sa.Column('observed_revision', sa.String(length=64), nullable=False),
    sa.Column('report_json', sa.Text(), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_calibrated_metric')),
    sa.UniqueConstraint('name', name=op.f('uq_calibrated_metric_name'))
    )


def downgrade() -> None:
    op.drop_table('calibrated_metric')
    op.drop_table('pair_class')
