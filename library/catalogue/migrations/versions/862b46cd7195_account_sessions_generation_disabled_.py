"""Account sessions: a session generation per user (bumped to revoke cookies), a disabled flag, an admin role.

Revision ID: 862b46cd7195
Revises: 73d5c751cad1
Create Date: 2026-12-02 08:07:16.476599
"""
from alembic import op
import sqlalchemy as sa


revision = '862b46cd7195'
down_revision = '73d5c751cad1'
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table('user_account', schema=None) as batch_op:
        batch_op.add_column(sa.Column('session_generation', sa.Integer(), server_default='0', nullable=False))
        batch_op.add_column(sa.Column('disabled', sa.Boolean(), server_default=sa.false(), nullable=False))
        batch_op.drop_constraint(op.f('ck_user_account_role'), type_='check')
        batch_op.create_check_constraint(op.f('ck_user_account_role'), "role IN ('reader', 'curator', 'admin')")


def downgrade() -> None:
    op.execute("UPDATE user_account SET role = 'curator' WHERE role = 'admin'")
    with op.batch_alter_table('user_account', schema=None) as batch_op:
        batch_op.drop_constraint(op.f('ck_user_account_role'), type_='check')
        batch_op.create_check_constraint(op.f('ck_user_account_role'), "role IN ('reader', 'curator')")
        batch_op.drop_column('disabled')
        batch_op.drop_column('session_generation')
