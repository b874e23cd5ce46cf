//! Stored models and evaluation sets: one row per distinct file (SHA-256).

use sqlx::types::Json;
use uuid::Uuid;

use super::rows::{DatasetRow, ModelRow};
use super::{DatasetRecord, ModelRecord, Page, Store, StoreError, page};

impl Store {
    /// Inserts a model unless one with the same SHA-256 exists; returns the
    /// stored record and whether it is new. The first name given is kept.
    pub async fn insert_model(&self, m: &ModelRecord) -> Result<(ModelRecord, bool), StoreError> {
        let inserted = sqlx::query(
            "INSERT INTO models (id, name, sha256, bytes, info, created_at) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6) ON CONFLICT (sha256) DO NOTHING",
        )
        .bind(m.id)
        .bind(&m.name)
        .bind(&m.sha256)
        .bind(m.bytes as i64)
        .bind(Json(&m.info))
        .bind(m.created_at)
        .execute(&self.pool)
        .await?
        .rows_affected()
            == 1;
        let stored = self.model_by_sha(&m.sha256).await?.ok_or_else(|| {
            StoreError::Corrupt(format!("model {} vanished after insert", m.sha256))
        })?;
        Ok((stored, inserted))
    }

    pub async fn model(&self, id: Uuid) -> Result<Option<ModelRecord>, StoreError> {
        let q = concat!("SELECT ", model_columns!(), " FROM models WHERE id = ?1");
        let row: Option<ModelRow> = sqlx::query_as(q)
            .bind(id)
            .fetch_optional(&self.pool)
            .await?;
        Ok(row.map(ModelRecord::from))
    }

    pub async fn model_by_sha(&self, sha256: &str) -> Result<Option<ModelRecord>, StoreError> {
        let q = concat!(
            "SELECT ",
            model_columns!(),
            " FROM models WHERE sha256 = ?1"
        );
        let row: Option<ModelRow> = sqlx::query_as(q)
            .bind(sha256)
            .fetch_optional(&self.pool)
            .await?;
        Ok(row.map(ModelRecord::from))
    }

    /// Models newest first, optionally only the one with a given SHA-256.
    pub async fn list_models(
        &self,
        sha256: Option<&str>,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<ModelRecord>, StoreError> {
        let q = concat!(
            "SELECT ",
            model_columns!(),
            " FROM models WHERE (?1 IS NULL OR sha256 = ?1) \
             AND (?2 IS NULL OR id < ?2) ORDER BY id DESC LIMIT ?3"
        );
        let rows: Vec<ModelRow> = sqlx::query_as(q)
            .bind(sha256)
            .bind(cursor)
            .bind(limit as i64 + 1)
            .fetch_all(&self.pool)
            .await?;
        let items = rows.into_iter().map(ModelRecord::from).collect();
        Ok(page(items, limit, |m| m.id))
    }

    pub async fn insert_dataset(
        &self,
        d: &DatasetRecord,
    ) -> Result<(DatasetRecord, bool), StoreError> {
        let inserted = sqlx::query(
            "INSERT INTO datasets (id, name, sha256, bytes, samples, has_labels, arrays, \
             largest_label, class_names, slice_count, created_at) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11) ON CONFLICT (sha256) DO NOTHING",
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
        .execute(&self.pool)
        .await?
        .rows_affected()
            == 1;
        let stored = self.dataset_by_sha(&d.sha256).await?.ok_or_else(|| {
            StoreError::Corrupt(format!("dataset {} vanished after insert", d.sha256))
        })?;
        Ok((stored, inserted))
    }

    pub async fn dataset(&self, id: Uuid) -> Result<Option<DatasetRecord>, StoreError> {
        let q = concat!(
            "SELECT ",
            dataset_columns!(),
            " FROM datasets WHERE id = ?1"
        );
        let row: Option<DatasetRow> = sqlx::query_as(q)
            .bind(id)
            .fetch_optional(&self.pool)
            .await?;
        Ok(row.map(DatasetRecord::from))
    }

    pub async fn dataset_by_sha(&self, sha256: &str) -> Result<Option<DatasetRecord>, StoreError> {
        let q = concat!(
            "SELECT ",
            dataset_columns!(),
            " FROM datasets WHERE sha256 = ?1"
        );
        let row: Option<DatasetRow> = sqlx::query_as(q)
            .bind(sha256)
            .fetch_optional(&self.pool)
            .await?;
        Ok(row.map(DatasetRecord::from))
    }

    pub async fn list_datasets(
        &self,
        sha256: Option<&str>,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<DatasetRecord>, StoreError> {
        let q = concat!(
            "SELECT ",
            dataset_columns!(),
            " FROM datasets WHERE (?1 IS NULL OR sha256 = ?1) \
             AND (?2 IS NULL OR id < ?2) ORDER BY id DESC LIMIT ?3"
        );
        let rows: Vec<DatasetRow> = sqlx::query_as(q)
            .bind(sha256)
            .bind(cursor)
            .bind(limit as i64 + 1)
            .fetch_all(&self.pool)
            .await?;
        let items = rows.into_iter().map(DatasetRecord::from).collect();
        Ok(page(items, limit, |d| d.id))
    }
}
