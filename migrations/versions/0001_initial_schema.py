"""initial schema

Revision ID: 0001
Revises: 
Create Date: 2026-12-02 19:59:07.599785

Every table of DESIGN.md section 2, the append-only triggers on the event
log, and the seeded transition catalogue.
"""
from __future__ import annotations

from alembic import op
import sqlalchemy as sa
import magvault.store.base
from sqlalchemy import Text
from sqlalchemy.dialects import postgresql


revision = '0001'
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table('app_user',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=64), nullable=False),
    sa.Column('role', sa.String(length=16), nullable=False),
    sa.Column('created_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.CheckConstraint("role IN ('viewer', 'recorder', 'curator')", name=op.f('ck_app_user_role_known')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_app_user')),
    sa.UniqueConstraint('name', name=op.f('uq_app_user_name'))
    )
    op.create_table('bundle',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('selection', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('manifest', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('sha256', sa.String(length=64), nullable=True),
    sa.Column('created_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_bundle')),
    sa.UniqueConstraint('name', 'version', name='uq_bundle_name_version')
    )
    op.create_table('derivation',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('method', sa.String(length=64), nullable=False),
    sa.Column('version', sa.String(length=16), nullable=False),
    sa.Column('parameters', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('inputs_key', sa.String(length=64), nullable=False),
    sa.Column('lineage_key', sa.String(length=64), nullable=False),
    sa.Column('input_runs', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('input_hashes', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('software_version', sa.String(length=32), nullable=False),
    sa.Column('operator', sa.String(length=64), nullable=True),
    sa.Column('created_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.Column('current', sa.Boolean(), nullable=False),
    sa.Column('warnings', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('diagnostics', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_derivation')),
    sa.UniqueConstraint('inputs_key', name=op.f('uq_derivation_inputs_key'))
    )
    with op.batch_alter_table('derivation', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_derivation_lineage_key'), ['lineage_key'], unique=False)

    op.create_table('event',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.Column('user_name', sa.String(length=64), nullable=False),
    sa.Column('action', sa.String(length=32), nullable=False),
    sa.Column('entity', sa.String(length=32), nullable=False),
    sa.Column('entity_id', sa.String(length=64), nullable=True),
    sa.Column('specimen_code', sa.String(length=64), nullable=True),
    sa.Column('before', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=True),
    sa.Column('after', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=True),
    sa.Column('message', sa.Text(), nullable=True),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_event'))
    )
    with op.batch_alter_table('event', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_event_at'), ['at'], unique=False)
        batch_op.create_index(batch_op.f('ix_event_specimen_code'), ['specimen_code'], unique=False)
        batch_op.create_index(batch_op.f('ix_event_user_name'), ['user_name'], unique=False)

    op.create_table('instrument',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=64), nullable=False),
    sa.Column('kind', sa.String(length=32), nullable=False),
    sa.Column('place', sa.String(length=200), nullable=True),
    sa.Column('notes', sa.Text(), nullable=True),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_instrument')),
    sa.UniqueConstraint('name', name=op.f('uq_instrument_name'))
    )
    op.create_table('origin',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('kind', sa.String(length=64), nullable=True),
    sa.Column('notes', sa.Text(), nullable=True),
    sa.Column('meta', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('created_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_origin')),
    sa.UniqueConstraint('name', name=op.f('uq_origin_name'))
    )
    op.create_table('profile',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=64), nullable=False),
    sa.Column('definition', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('created_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_profile')),
    sa.UniqueConstraint('name', name=op.f('uq_profile_name'))
    )
    op.create_table('raw_file',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('sha256', sa.String(length=64), nullable=False),
    sa.Column('size', sa.Integer(), nullable=False),
    sa.Column('media_type', sa.String(length=100), nullable=False),
    sa.Column('first_name', sa.String(length=255), nullable=False),
    sa.Column('data', sa.LargeBinary(), nullable=True),
    sa.Column('stored_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.CheckConstraint('length(sha256) = 64', name=op.f('ck_raw_file_sha256_length')),
    sa.CheckConstraint('size >= 0', name=op.f('ck_raw_file_size_nonneg')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_raw_file')),
    sa.UniqueConstraint('sha256', name=op.f('uq_raw_file_sha256'))
    )
    op.create_table('saved_query',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('name', sa.String(length=64), nullable=False),
    sa.Column('query', sa.String(length=32), nullable=False),
    sa.Column('parameters', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('created_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.Column('created_by', sa.String(length=64), nullable=True),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_saved_query')),
    sa.UniqueConstraint('name', name=op.f('uq_saved_query_name'))
    )
    op.create_table('transition_kind',
    sa.Column('id', sa.String(length=32), nullable=False),
    sa.Column('name', sa.String(length=200), nullable=False),
    sa.Column('typical_lo_k', sa.Float(), nullable=False),
    sa.Column('typical_hi_k', sa.Float(), nullable=False),
    sa.Column('window_lo_k', sa.Float(), nullable=False),
    sa.Column('window_hi_k', sa.Float(), nullable=False),
    sa.Column('run_kinds', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('mineral', sa.String(length=64), nullable=True),
    sa.Column('note', sa.Text(), nullable=True),
    sa.Column('seeded', sa.Boolean(), nullable=False),
    sa.CheckConstraint('typical_lo_k > 0 AND typical_lo_k <= typical_hi_k', name=op.f('ck_transition_kind_typical_range')),
    sa.CheckConstraint('window_lo_k > 0 AND window_lo_k <= typical_lo_k AND typical_hi_k <= window_hi_k', name=op.f('ck_transition_kind_window_range')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_transition_kind'))
    )
    op.create_table('calibration',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('instrument_id', sa.Integer(), nullable=False),
    sa.Column('at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.Column('note', sa.Text(), nullable=True),
    sa.Column('raw_file_id', sa.Integer(), nullable=True),
    sa.Column('source_name', sa.String(length=255), nullable=True),
    sa.ForeignKeyConstraint(['instrument_id'], ['instrument.id'], name=op.f('fk_calibration_instrument_id_instrument')),
    sa.ForeignKeyConstraint(['raw_file_id'], ['raw_file.id'], name=op.f('fk_calibration_raw_file_id_raw_file')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_calibration'))
    )
    with op.batch_alter_table('calibration', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_calibration_instrument_id'), ['instrument_id'], unique=False)

    op.create_table('specimen',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('code', sa.String(length=64), nullable=False),
    sa.Column('parent_id', sa.Integer(), nullable=True),
    sa.Column('origin_id', sa.Integer(), nullable=True),
    sa.Column('kind', sa.String(length=32), nullable=True),
    sa.Column('mass_kg', sa.Float(), nullable=True),
    sa.Column('mass_uncertainty_kg', sa.Float(), nullable=True),
    sa.Column('dimensions', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=True),
    sa.Column('same_orientation', sa.Boolean(), nullable=False),
    sa.Column('storage', sa.String(length=200), nullable=True),
    sa.Column('notes', sa.Text(), nullable=True),
    sa.Column('created_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.Column('created_by', sa.String(length=64), nullable=True),
    sa.CheckConstraint('mass_kg IS NULL OR mass_kg > 0', name=op.f('ck_specimen_mass_positive')),
    sa.CheckConstraint('mass_uncertainty_kg IS NULL OR mass_uncertainty_kg >= 0', name=op.f('ck_specimen_mass_unc_nonneg')),
    sa.CheckConstraint('parent_id IS NULL OR parent_id <> id', name=op.f('ck_specimen_not_own_parent')),
    sa.ForeignKeyConstraint(['origin_id'], ['origin.id'], name=op.f('fk_specimen_origin_id_origin')),
    sa.ForeignKeyConstraint(['parent_id'], ['specimen.id'], name=op.f('fk_specimen_parent_id_specimen')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_specimen')),
    sa.UniqueConstraint('code', name=op.f('uq_specimen_code'))
    )
    with op.batch_alter_table('specimen', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_specimen_origin_id'), ['origin_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_specimen_parent_id'), ['parent_id'], unique=False)

    op.create_table('composition',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('specimen_id', sa.Integer(), nullable=False),
    sa.Column('method', sa.String(length=64), nullable=False),
    sa.Column('basis', sa.String(length=16), nullable=False),
    sa.Column('amounts', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('x', sa.Float(), nullable=False),
    sa.Column('x_uncertainty', sa.Float(), nullable=True),
    sa.Column('fe_s_ratio', sa.Float(), nullable=True),
    sa.Column('fe_s_ratio_uncertainty', sa.Float(), nullable=True),
    sa.Column('superstructure', sa.String(length=16), nullable=True),
    sa.Column('measured_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.Column('warnings', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('notes', sa.Text(), nullable=True),
    sa.CheckConstraint('fe_s_ratio_uncertainty IS NULL OR fe_s_ratio_uncertainty >= 0', name=op.f('ck_composition_ratio_unc_nonneg')),
    sa.CheckConstraint('x < 1', name=op.f('ck_composition_x_below_one')),
    sa.CheckConstraint('x_uncertainty IS NULL OR x_uncertainty >= 0', name=op.f('ck_composition_x_unc_nonneg')),
    sa.ForeignKeyConstraint(['specimen_id'], ['specimen.id'], name=op.f('fk_composition_specimen_id_specimen')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_composition'))
    )
    with op.batch_alter_table('composition', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_composition_specimen_id'), ['specimen_id'], unique=False)

    op.create_table('orientation',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('specimen_id', sa.Integer(), nullable=False),
    sa.Column('matrix', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('system', sa.String(length=16), nullable=False),
    sa.Column('cell', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=True),
    sa.Column('method', sa.String(length=32), nullable=False),
    sa.Column('uncertainty_deg', sa.Float(), nullable=True),
    sa.Column('measured_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.Column('notes', sa.Text(), nullable=True),
    sa.CheckConstraint('uncertainty_deg IS NULL OR uncertainty_deg >= 0', name=op.f('ck_orientation_unc_nonneg')),
    sa.ForeignKeyConstraint(['specimen_id'], ['specimen.id'], name=op.f('fk_orientation_specimen_id_specimen')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_orientation'))
    )
    with op.batch_alter_table('orientation', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_orientation_specimen_id'), ['specimen_id'], unique=False)

    op.create_table('run',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('specimen_id', sa.Integer(), nullable=False),
    sa.Column('kind', sa.String(length=32), nullable=False),
    sa.Column('status', sa.String(length=16), nullable=False),
    sa.Column('instrument_id', sa.Integer(), nullable=True),
    sa.Column('operator', sa.String(length=64), nullable=True),
    sa.Column('started', magvault.store.base.UTCDateTime(), nullable=True),
    sa.Column('finished', magvault.store.base.UTCDateTime(), nullable=True),
    sa.Column('conditions', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('direction', sa.String(length=64), nullable=True),
    sa.Column('group_label', sa.String(length=64), nullable=True),
    sa.Column('raw_file_id', sa.Integer(), nullable=True),
    sa.Column('source_name', sa.String(length=255), nullable=True),
    sa.Column('superseded_by_id', sa.Integer(), nullable=True),
    sa.Column('status_reason', sa.Text(), nullable=True),
    sa.Column('notes', sa.Text(), nullable=True),
    sa.Column('created_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.CheckConstraint("kind IN ('thermomagnetic', 'hysteresis', 'backfield', 'susceptibility', 'resonance', 'diffraction', 'calorimetry')", name=op.f('ck_run_kind_known')),
    sa.CheckConstraint("status <> 'superseded' OR superseded_by_id IS NOT NULL", name=op.f('ck_run_superseded_has_successor')),
    sa.CheckConstraint("status IN ('planned', 'running', 'recorded', 'superseded', 'retracted')", name=op.f('ck_run_status_known')),
    sa.CheckConstraint("status NOT IN ('recorded', 'superseded') OR raw_file_id IS NOT NULL", name=op.f('ck_run_recorded_has_bytes')),
    sa.ForeignKeyConstraint(['instrument_id'], ['instrument.id'], name=op.f('fk_run_instrument_id_instrument')),
    sa.ForeignKeyConstraint(['raw_file_id'], ['raw_file.id'], name=op.f('fk_run_raw_file_id_raw_file')),
    sa.ForeignKeyConstraint(['specimen_id'], ['specimen.id'], name=op.f('fk_run_specimen_id_specimen')),
    sa.ForeignKeyConstraint(['superseded_by_id'], ['run.id'], name=op.f('fk_run_superseded_by_id_run')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_run'))
    )
    with op.batch_alter_table('run', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_run_group_label'), ['group_label'], unique=False)
        batch_op.create_index('ix_run_kind_status', ['kind', 'status'], unique=False)
        batch_op.create_index(batch_op.f('ix_run_raw_file_id'), ['raw_file_id'], unique=False)
        batch_op.create_index('ix_run_specimen_kind', ['specimen_id', 'kind'], unique=False)

    op.create_table('treatment',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('specimen_id', sa.Integer(), nullable=False),
    sa.Column('kind', sa.String(length=32), nullable=False),
    sa.Column('at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.Column('conditions', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('notes', sa.Text(), nullable=True),
    sa.ForeignKeyConstraint(['specimen_id'], ['specimen.id'], name=op.f('fk_treatment_specimen_id_specimen')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_treatment'))
    )
    with op.batch_alter_table('treatment', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_treatment_specimen_id'), ['specimen_id'], unique=False)

    op.create_table('image',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('specimen_id', sa.Integer(), nullable=True),
    sa.Column('run_id', sa.Integer(), nullable=True),
    sa.Column('raw_file_id', sa.Integer(), nullable=False),
    sa.Column('source_name', sa.String(length=255), nullable=False),
    sa.Column('pixel_size_m', sa.Float(), nullable=True),
    sa.Column('width_px', sa.Integer(), nullable=True),
    sa.Column('height_px', sa.Integer(), nullable=True),
    sa.Column('caption', sa.Text(), nullable=True),
    sa.Column('created_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.CheckConstraint('pixel_size_m IS NULL OR pixel_size_m > 0', name=op.f('ck_image_pixel_size_positive')),
    sa.CheckConstraint('specimen_id IS NOT NULL OR run_id IS NOT NULL', name=op.f('ck_image_attached')),
    sa.ForeignKeyConstraint(['raw_file_id'], ['raw_file.id'], name=op.f('fk_image_raw_file_id_raw_file')),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_image_run_id_run')),
    sa.ForeignKeyConstraint(['specimen_id'], ['specimen.id'], name=op.f('fk_image_specimen_id_specimen')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_image'))
    )
    with op.batch_alter_table('image', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_image_run_id'), ['run_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_image_specimen_id'), ['specimen_id'], unique=False)

    op.create_table('result',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('derivation_id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('specimen_id', sa.Integer(), nullable=False),
    sa.Column('quantity', sa.String(length=64), nullable=False),
    sa.Column('value', sa.Float(), nullable=False),
    sa.Column('uncertainty', sa.Float(), nullable=True),
    sa.Column('unit', sa.String(length=32), nullable=False),
    sa.Column('method', sa.String(length=64), nullable=False),
    sa.Column('block_temperature_k', sa.Float(), nullable=True),
    sa.Column('branch', sa.String(length=16), nullable=True),
    sa.Column('current', sa.Boolean(), nullable=False),
    sa.Column('diagnostics', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.CheckConstraint('block_temperature_k IS NULL OR block_temperature_k > 0', name=op.f('ck_result_block_kelvin_positive')),
    sa.CheckConstraint('uncertainty IS NULL OR uncertainty >= 0', name=op.f('ck_result_unc_nonneg')),
    sa.ForeignKeyConstraint(['derivation_id'], ['derivation.id'], name=op.f('fk_result_derivation_id_derivation')),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_result_run_id_run')),
    sa.ForeignKeyConstraint(['specimen_id'], ['specimen.id'], name=op.f('fk_result_specimen_id_specimen')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_result'))
    )
    with op.batch_alter_table('result', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_result_derivation_id'), ['derivation_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_result_quantity'), ['quantity'], unique=False)
        batch_op.create_index(batch_op.f('ix_result_run_id'), ['run_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_result_specimen_id'), ['specimen_id'], unique=False)

    op.create_table('series',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('shape', sa.String(length=32), nullable=False),
    sa.Column('encoding', sa.String(length=32), nullable=True),
    sa.Column('profile_name', sa.String(length=64), nullable=True),
    sa.Column('mapping', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('columns', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.Column('n_rows', sa.Integer(), nullable=False),
    sa.Column('data', sa.LargeBinary(), nullable=True),
    sa.Column('created_at', magvault.store.base.UTCDateTime(), nullable=False),
    sa.CheckConstraint('n_rows >= 0', name=op.f('ck_series_rows_nonneg')),
    sa.CheckConstraint('version >= 1', name=op.f('ck_series_version_positive')),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_series_run_id_run')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_series')),
    sa.UniqueConstraint('run_id', 'version', name='uq_series_run_version')
    )
    op.create_table('transition',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('derivation_id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('specimen_id', sa.Integer(), nullable=False),
    sa.Column('kind', sa.String(length=32), nullable=False),
    sa.Column('temperature_k', sa.Float(), nullable=False),
    sa.Column('uncertainty_k', sa.Float(), nullable=True),
    sa.Column('method', sa.String(length=64), nullable=False),
    sa.Column('branch', sa.String(length=16), nullable=True),
    sa.Column('component', sa.Integer(), nullable=False),
    sa.Column('is_primary', sa.Boolean(), nullable=False),
    sa.Column('width_k', sa.Float(), nullable=True),
    sa.Column('ambiguous', sa.Boolean(), nullable=False),
    sa.Column('current', sa.Boolean(), nullable=False),
    sa.Column('diagnostics', sa.JSON().with_variant(postgresql.JSONB(astext_type=Text()), 'postgresql'), nullable=False),
    sa.CheckConstraint("branch IS NULL OR branch IN ('heating', 'cooling')", name=op.f('ck_transition_branch_known')),
    sa.CheckConstraint('component >= 1', name=op.f('ck_transition_component_positive')),
    sa.CheckConstraint('temperature_k > 0', name=op.f('ck_transition_kelvin_positive')),
    sa.CheckConstraint('uncertainty_k IS NULL OR uncertainty_k >= 0', name=op.f('ck_transition_unc_nonneg')),
    sa.CheckConstraint('width_k IS NULL OR width_k >= 0', name=op.f('ck_transition_width_nonneg')),
    sa.ForeignKeyConstraint(['derivation_id'], ['derivation.id'], name=op.f('fk_transition_derivation_id_derivation')),
    sa.ForeignKeyConstraint(['kind'], ['transition_kind.id'], name=op.f('fk_transition_kind_transition_kind')),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_transition_run_id_run')),
    sa.ForeignKeyConstraint(['specimen_id'], ['specimen.id'], name=op.f('fk_transition_specimen_id_specimen')),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_transition'))
    )
    with op.batch_alter_table('transition', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_transition_derivation_id'), ['derivation_id'], unique=False)
        batch_op.create_index('ix_transition_kind_primary', ['kind', 'is_primary', 'current', 'specimen_id'], unique=False)
        batch_op.create_index(batch_op.f('ix_transition_run_id'), ['run_id'], unique=False)
        batch_op.create_index('ix_transition_specimen_kind', ['specimen_id', 'kind'], unique=False)

    op.create_table('derivation_input',
    sa.Column('derivation_id', sa.Integer(), nullable=False),
    sa.Column('run_id', sa.Integer(), nullable=False),
    sa.Column('series_id', sa.Integer(), nullable=True),
    sa.ForeignKeyConstraint(['derivation_id'], ['derivation.id'], name=op.f('fk_derivation_input_derivation_id_derivation')),
    sa.ForeignKeyConstraint(['run_id'], ['run.id'], name=op.f('fk_derivation_input_run_id_run')),
    sa.ForeignKeyConstraint(['series_id'], ['series.id'], name=op.f('fk_derivation_input_series_id_series')),
    sa.PrimaryKeyConstraint('derivation_id', 'run_id', name=op.f('pk_derivation_input'))
    )
    with op.batch_alter_table('derivation_input', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_derivation_input_run_id'), ['run_id'], unique=False)
    _create_event_guards()
    _seed_transition_kinds()


def downgrade() -> None:
    _drop_event_guards()
    with op.batch_alter_table('derivation_input', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_derivation_input_run_id'))

    op.drop_table('derivation_input')
    with op.batch_alter_table('transition', schema=None) as batch_op:
        batch_op.drop_index('ix_transition_specimen_kind')
        batch_op.drop_index(batch_op.f('ix_transition_run_id'))
        batch_op.drop_index('ix_transition_kind_primary')
        batch_op.drop_index(batch_op.f('ix_transition_derivation_id'))

    op.drop_table('transition')
    op.drop_table('series')
    with op.batch_alter_table('result', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_result_specimen_id'))
        batch_op.drop_index(batch_op.f('ix_result_run_id'))
        batch_op.drop_index(batch_op.f('ix_result_quantity'))
        batch_op.drop_index(batch_op.f('ix_result_derivation_id'))

    op.drop_table('result')
    with op.batch_alter_table('image', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_image_specimen_id'))
        batch_op.drop_index(batch_op.f('ix_image_run_id'))

    op.drop_table('image')
    with op.batch_alter_table('treatment', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_treatment_specimen_id'))

    op.drop_table('treatment')
    with op.batch_alter_table('run', schema=None) as batch_op:
        batch_op.drop_index('ix_run_specimen_kind')
        batch_op.drop_index(batch_op.f('ix_run_raw_file_id'))
        batch_op.drop_index('ix_run_kind_status')
        batch_op.drop_index(batch_op.f('ix_run_group_label'))

    op.drop_table('run')
    with op.batch_alter_table('orientation', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_orientation_specimen_id'))

    op.drop_table('orientation')
    with op.batch_alter_table('composition', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_composition_specimen_id'))

    op.drop_table('composition')
    with op.batch_alter_table('specimen', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_specimen_parent_id'))
        batch_op.drop_index(batch_op.f('ix_specimen_origin_id'))

    op.drop_table('specimen')
    with op.batch_alter_table('calibration', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_calibration_instrument_id'))

    op.drop_table('calibration')
    op.drop_table('transition_kind')
    op.drop_table('saved_query')
    op.drop_table('raw_file')
    op.drop_table('profile')
    op.drop_table('origin')
    op.drop_table('instrument')
    with op.batch_alter_table('event', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_event_user_name'))
        batch_op.drop_index(batch_op.f('ix_event_specimen_code'))
        batch_op.drop_index(batch_op.f('ix_event_at'))

    op.drop_table('event')
    with op.batch_alter_table('derivation', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_derivation_lineage_key'))

    op.drop_table('derivation')
    op.drop_table('bundle')
    op.drop_table('app_user')


# The event log refuses UPDATE and DELETE at the database level.
_GUARD_MESSAGE = "event log is append-only"


def _create_event_guards() -> None:
    if op.get_bind().dialect.name == "postgresql":
        op.execute(f"""
            CREATE FUNCTION magvault_event_append_only() RETURNS trigger AS $$
            BEGIN RAISE EXCEPTION '{_GUARD_MESSAGE}'; END;
            $$ LANGUAGE plpgsql""")
        for verb in ("UPDATE", "DELETE"):
            op.execute(f"CREATE TRIGGER event_no_{verb.lower()} BEFORE {verb} ON event "
                       f"FOR EACH ROW EXECUTE FUNCTION magvault_event_append_only()")
    else:
        for verb in ("UPDATE", "DELETE"):
            op.execute(f"CREATE TRIGGER event_no_{verb.lower()} BEFORE {verb} ON event "
                       f"BEGIN SELECT RAISE(ABORT, '{_GUARD_MESSAGE}'); END")


def _drop_event_guards() -> None:
    for verb in ("update", "delete"):
        op.execute(f"DROP TRIGGER IF EXISTS event_no_{verb}" +
                   (" ON event" if op.get_bind().dialect.name == "postgresql" else ""))
    if op.get_bind().dialect.name == "postgresql":
        op.execute("DROP FUNCTION IF EXISTS magvault_event_append_only()")


# The catalogue as first seeded (DESIGN.md section 3), frozen here: a migration must not change
# with later edits of magvault.catalogue; later changes are migrations of their own.
_SEED_KINDS_0001 = (
    ('ordering', 'Magnetic ordering of pyrrhotite', (585.0, 605.0), (540.0, 650.0), ('thermomagnetic', 'susceptibility', 'resonance', 'diffraction', 'calorimetry'), 'pyrrhotite', 'Ferrimagnetic ordering; remarkably insensitive to composition.'),
    ('low-t', 'Low-temperature transition of 4C pyrrhotite', (30.0, 34.0), (20.0, 45.0), ('thermomagnetic', 'susceptibility', 'resonance', 'calorimetry', 'hysteresis'), 'pyrrhotite (4C)', 'Belongs to 4C-bearing pyrrhotite near Fe7S8; absent in troilite.'),
    ('spin-reorientation', 'Spin reorientation of troilite', (410.0, 450.0), (380.0, 462.0), ('thermomagnetic', 'susceptibility', 'resonance', 'diffraction'), 'troilite', ''),
    ('vacancy-order', 'Vacancy order-disorder of pyrrhotite', (470.0, 500.0), (455.0, 535.0), ('diffraction', 'calorimetry', 'resonance', 'susceptibility', 'thermomagnetic'), 'pyrrhotite', ''),
    ('verwey', 'Verwey transition of magnetite', (118.0, 125.0), (95.0, 145.0), ('thermomagnetic', 'susceptibility', 'calorimetry', 'resonance'), 'magnetite', ''),
    ('magnetite-curie', 'Curie temperature of magnetite', (845.0, 860.0), (800.0, 900.0), ('thermomagnetic', 'susceptibility'), 'magnetite', ''),
    ('morin', 'Morin transition of hematite', (250.0, 260.0), (225.0, 280.0), ('thermomagnetic', 'susceptibility'), 'hematite', ''),
)


def _seed_transition_kinds() -> None:
    table = sa.table("transition_kind", sa.column("id", sa.String), sa.column("name", sa.String),
                     sa.column("typical_lo_k", sa.Float), sa.column("typical_hi_k", sa.Float),
                     sa.column("window_lo_k", sa.Float), sa.column("window_hi_k", sa.Float),
                     sa.column("run_kinds", sa.JSON), sa.column("mineral", sa.String),
                     sa.column("note", sa.Text), sa.column("seeded", sa.Boolean))
    op.bulk_insert(table, [
        {"id": kid, "name": name, "typical_lo_k": typical[0], "typical_hi_k": typical[1],
         "window_lo_k": window[0], "window_hi_k": window[1], "run_kinds": list(run_kinds),
         "mineral": mineral, "note": note, "seeded": True}
        for kid, name, typical, window, run_kinds, mineral, note in _SEED_KINDS_0001])
