"""Accounts and background jobs: web sign-in users (reader/curator) and persisted job progress.

Revision ID: 73d5c751cad1
Revises: 40b0f32b6f35
Create Date: 2026-12-01 23:48:42.048947
"""
from alembic import op
import sqlalchemy as sa


revision = '73d5c751cad1'
down_revision = '40b0f32b6f35'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('background_job',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('kind', sa.String(length=40), nullable=False),
    sa.Column('description', sa.Text(), nullable=False),
    sa.Column('parameters_json', sa.Text(), nullable=False),
    sa.Column('state', sa.String(length=12), nullable=False),
    sa.Column('total', sa.Integer(), nullable=False),
    sa.Column('done', sa.Integer(), nullable=False),
    sa.Column('failed', sa.Integer(), nullable=False),
    sa.Column('message', sa.Text(), nullable=True),
    sa.Column('created_by', sa.String(length=100), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('started_at', sa.DateTime(timezone=True), nullable=True),
    sa.Column('finished_at', sa.DateTime(timezone=True), nullable=True),
    sa.CheckConstraint("state IN ('queued', 'running', 'finished', 'failed', 'interrupted')", name=op.f('ck_background_job_state')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_background_job'))
    )
    with op.batch_alter_table('background_job', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_background_job_state'), ['state'], unique=False)

    op.create_table('user_account',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('username', sa.String(length=60), nullable=False),
    sa.Column('password_hash', sa.String(length=255), nullable=False),
    sa.Column('role', sa.String(length=10), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.CheckConstraint("role IN ('reader', 'curator')", name=op.f('ck_user_account_role')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_user_account')),
    sa.UniqueConstraint('username', name=op.f('uq_user_account_username'))
    )


def downgrade() -> None:
    op.drop_table('user_account')
    with op.batch_alter_table('background_job', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_background_job_state'))

    op.drop_table('background_job')
