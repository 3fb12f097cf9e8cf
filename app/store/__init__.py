"""The store: assessments kept in any SQLAlchemy database (SQLite by default), read back as frames."""

from foldwise.store.engine import checkpoint, db_url_from, default_db_url, make_engine
from foldwise.store.ensembles import (
    EnsembleRecord,
    StoredModel,
    delete_ensemble,
    ensemble_counts,
    ensemble_members_for,
    ensembles_for,
    family_estimators_for,
    fitted_model_counts,
    fitted_models_for,
    get_ensemble,
    insert_ensemble,
)
from foldwise.store.lookup import AssessmentNotFound
from foldwise.store.queries import AssessmentRecord, list_assessments
from foldwise.store.reader import (
    AssessmentReader,
    StoreReader,
    failures_for,
    family_winners_for,
    fold_sizes_for,
    get_assessment,
    inner_scores_for,
    outer_scores_for,
    read_assessment,
    winners_for,
)
from foldwise.store.restore import (
    StoredPrediction,
    final_model_for,
    fold_targets_for,
    load_payload,
    outer_folds_for,
    predictions_for,
)
from foldwise.store.writes import UuidConflict, delete_assessment, insert_assessment

__all__ = [
    "AssessmentNotFound",
    "AssessmentReader",
    "AssessmentRecord",
    "StoreReader",
    "UuidConflict",
    "EnsembleRecord",
    "StoredModel",
    "StoredPrediction",
    "checkpoint",
    "db_url_from",
    "default_db_url",
    "delete_assessment",
    "delete_ensemble",
    "ensemble_counts",
    "ensemble_members_for",
    "ensembles_for",
    "failures_for",
    "family_estimators_for",
    "family_winners_for",
    "fold_sizes_for",
    "fold_targets_for",
    "fitted_model_counts",
    "fitted_models_for",
    "get_assessment",
    "get_ensemble",
    "inner_scores_for",
    "insert_assessment",
    "insert_ensemble",
    "list_assessments",
    "load_payload",
    "final_model_for",
    "make_engine",
    "outer_folds_for",
    "outer_scores_for",
    "predictions_for",
    "read_assessment",
    "winners_for",
]
