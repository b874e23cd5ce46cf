//! Stored models and evaluation sets: one row per distinct file (SHA-256).

use sqlx::types::Json;
use time::OffsetDateTime;
use uuid::Uuid;

use super::rows::{DatasetRow, ModelRow};
use super::{DatasetRecord, ModelRecord, Page, Store, StoreError, page};

/// What keeps a model from being deleted: an unfinished evaluation, or a
/// project whose current baseline it is. `Option<String>`, read in
/// transaction `$tx` (a macro: it runs on either database).
macro_rules! model_in_use {
    ($tx:expr, $id:expr) => {
        async {
            let tx = $tx;
            let id: Uuid = $id;
            let live: Option<(Uuid,)> = sqlx::query_as(
                "SELECT e.id FROM evaluations e WHERE e.status IN ('queued', 'running') AND \
                 (e.teacher_id = $1 OR EXISTS (SELECT 1 FROM evaluation_students s \
                  WHERE s.evaluation_id = e.id AND s.model_id = $1) \
                  OR e.baseline_id = $1) LIMIT 1",
            )
            .bind(id)
            .fetch_optional(&mut **tx)
            .await?;
            if let Some((e,)) = live {
                return Ok::<_, StoreError>(Some(format!(
                    "evaluation {e}, which has not finished, uses it"
                )));
            }
            let baseline: Option<(String,)> = sqlx::query_as(
                "SELECT b.project FROM baselines b WHERE b.model_id = $1 AND b.position = \
                 (SELECT MAX(position) FROM baselines c WHERE c.project = b.project) LIMIT 1",
            )
            .bind(id)
            .fetch_optional(&mut **tx)
            .await?;
            Ok(baseline.map(|(p,)| format!("it is project '{p}''s current baseline")))
        }
    };
}

impl Store {
    /// Bytes of every stored model and evaluation set.
    pub async fn stored_bytes(&self) -> Result<u64, StoreError> {
        on_pool!(self, |pool| {
            let (n,): (i64,) = sqlx::query_as(
            // PostgreSQL sums BIGINT as NUMERIC: cast back.
            "SELECT CAST((SELECT COALESCE(SUM(bytes), 0) FROM models WHERE deleted_at IS NULL) + \
             (SELECT COALESCE(SUM(bytes), 0) FROM datasets WHERE deleted_at IS NULL) AS BIGINT)",
        )
        .fetch_one(pool)
        .await?;
            Ok(n as u64)
        })
    }

    /// Inserts a model unless one with the same SHA-256 exists; returns the
    /// stored record and whether it is new. The first name given is kept; a
    /// deleted model of the same bytes is revived under its old id.
    pub async fn insert_model(&self, m: &ModelRecord) -> Result<(ModelRecord, bool), StoreError> {
        on_pool!(self, |pool| {
            let inserted = sqlx::query(
            "INSERT INTO models (id, name, sha256, bytes, info, created_at) \
             VALUES ($1, $2, $3, $4, $5, $6) \
             ON CONFLICT (sha256) DO UPDATE SET deleted_at = NULL WHERE models.deleted_at IS NOT NULL",
        )
        .bind(m.id)
        .bind(&m.name)
        .bind(&m.sha256)
        .bind(m.bytes as i64)
        .bind(Json(&m.info))
        .bind(m.created_at)
        .execute(pool)
        .await?
        .rows_affected()
            == 1;
            let stored = self.model_by_sha(&m.sha256).await?.ok_or_else(|| {
                StoreError::Corrupt(format!("model {} vanished after insert", m.sha256))
            })?;
            Ok((stored, inserted))
        })
    }

    pub async fn model(&self, id: Uuid) -> Result<Option<ModelRecord>, StoreError> {
        on_pool!(self, |pool| {
            let q = concat!(
                "SELECT ",
                model_columns!(),
                " FROM models WHERE id = $1 AND deleted_at IS NULL"
            );
            let row: Option<ModelRow> = sqlx::query_as(q).bind(id).fetch_optional(pool).await?;
            Ok(row.map(ModelRecord::from))
        })
    }

    pub async fn model_by_sha(&self, sha256: &str) -> Result<Option<ModelRecord>, StoreError> {
        on_pool!(self, |pool| {
            let q = concat!(
                "SELECT ",
                model_columns!(),
                " FROM models WHERE sha256 = $1 AND deleted_at IS NULL"
            );
            let row: Option<ModelRow> = sqlx::query_as(q).bind(sha256).fetch_optional(pool).await?;
            Ok(row.map(ModelRecord::from))
        })
    }

    /// Models newest first, optionally only the one with a given SHA-256.
    pub async fn list_models(
        &self,
        sha256: Option<&str>,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<ModelRecord>, StoreError> {
        on_pool!(self, |pool| {
            let q = concat!(
                "SELECT ",
                model_columns!(),
                " FROM models WHERE deleted_at IS NULL AND ($1 IS NULL OR sha256 = $1) \
             AND ($2 IS NULL OR id < $2) ORDER BY id DESC LIMIT $3"
            );
            let rows: Vec<ModelRow> = sqlx::query_as(q)
                .bind(sha256)
                .bind(cursor)
                .bind(limit as i64 + 1)
                .fetch_all(pool)
                .await?;
            let items = rows.into_iter().map(ModelRecord::from).collect();
            Ok(page(items, limit, |m| m.id))
        })
    }

    pub async fn insert_dataset(
        &self,
        d: &DatasetRecord,
    ) -> Result<(DatasetRecord, bool), StoreError> {
        on_pool!(self, |pool| {
            let inserted = sqlx::query(
            "INSERT INTO datasets (id, name, sha256, bytes, samples, has_labels, arrays, \
             largest_label, class_names, slice_count, created_at) \
             VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11) \
             ON CONFLICT (sha256) DO UPDATE SET deleted_at = NULL WHERE datasets.deleted_at IS NOT NULL",
        )
        .bind(d.id)
        .bind(&d.name)
        .bind(&d.sha256)
        .bind(d.bytes as i64)
        .bind(d.samples as i64)
        .bind(d.has_labels)
        .bind(Json(&d.arrays))
        .bind(d.largest_label.map(Json))
        .bind(d.class_names.as_ref().map(Json))
        .bind(d.slice_count.map(|n| n as i64))
        .bind(d.created_at)
        .execute(pool)
        .await?
        .rows_affected()
            == 1;
            let stored = self.dataset_by_sha(&d.sha256).await?.ok_or_else(|| {
                StoreError::Corrupt(format!("dataset {} vanished after insert", d.sha256))
            })?;
            Ok((stored, inserted))
        })
    }

    pub async fn dataset(&self, id: Uuid) -> Result<Option<DatasetRecord>, StoreError> {
        on_pool!(self, |pool| {
            let q = concat!(
                "SELECT ",
                dataset_columns!(),
                " FROM datasets WHERE id = $1 AND deleted_at IS NULL"
            );
            let row: Option<DatasetRow> = sqlx::query_as(q).bind(id).fetch_optional(pool).await?;
            Ok(row.map(DatasetRecord::from))
        })
    }

    pub async fn dataset_by_sha(&self, sha256: &str) -> Result<Option<DatasetRecord>, StoreError> {
        on_pool!(self, |pool| {
            let q = concat!(
                "SELECT ",
                dataset_columns!(),
                " FROM datasets WHERE sha256 = $1 AND deleted_at IS NULL"
            );
            let row: Option<DatasetRow> =
                sqlx::query_as(q).bind(sha256).fetch_optional(pool).await?;
            Ok(row.map(DatasetRecord::from))
        })
    }

    pub async fn list_datasets(
        &self,
        sha256: Option<&str>,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<DatasetRecord>, StoreError> {
        on_pool!(self, |pool| {
            let q = concat!(
                "SELECT ",
                dataset_columns!(),
                " FROM datasets WHERE deleted_at IS NULL AND ($1 IS NULL OR sha256 = $1) \
             AND ($2 IS NULL OR id < $2) ORDER BY id DESC LIMIT $3"
            );
            let rows: Vec<DatasetRow> = sqlx::query_as(q)
                .bind(sha256)
                .bind(cursor)
                .bind(limit as i64 + 1)
                .fetch_all(pool)
                .await?;
            let items = rows.into_iter().map(DatasetRecord::from).collect();
            Ok(page(items, limit, |d| d.id))
        })
    }
}

impl Store {
    /// Marks a model deleted unless something uses it: `Ok(Err(why))`
    /// then, and nothing changes. The mark comes first, so the check runs
    /// holding the write lock and no evaluation can start using the model
    /// between the two (see `create_evaluation`).
    pub async fn delete_model(&self, id: Uuid) -> Result<Result<(), String>, StoreError> {
        on_pool!(self, |pool, postgres| {
            let mut tx = pool.begin().await?;
            lock_catalog!(tx, postgres);
            sqlx::query("UPDATE models SET deleted_at = $1 WHERE id = $2 AND deleted_at IS NULL")
                .bind(OffsetDateTime::now_utc())
                .bind(id)
                .execute(&mut *tx)
                .await?;
            if let Some(why) = model_in_use!(&mut tx, id).await? {
                return Ok(Err(why));
            }
            tx.commit().await?;
            Ok(Ok(()))
        })
    }

    /// As `delete_model`, for an evaluation set.
    pub async fn delete_dataset(&self, id: Uuid) -> Result<Result<(), String>, StoreError> {
        on_pool!(self, |pool, postgres| {
            let mut tx = pool.begin().await?;
            lock_catalog!(tx, postgres);
            sqlx::query("UPDATE datasets SET deleted_at = $1 WHERE id = $2 AND deleted_at IS NULL")
                .bind(OffsetDateTime::now_utc())
                .bind(id)
                .execute(&mut *tx)
                .await?;
            let live: Option<(Uuid,)> = sqlx::query_as(
            "SELECT id FROM evaluations WHERE dataset_id = $1 AND status IN ('queued', 'running') \
             LIMIT 1",
        )
        .bind(id)
        .fetch_optional(&mut *tx)
        .await?;
            if let Some((e,)) = live {
                return Ok(Err(format!(
                    "evaluation {e}, which has not finished, uses it"
                )));
            }
            tx.commit().await?;
            Ok(Ok(()))
        })
    }
}
