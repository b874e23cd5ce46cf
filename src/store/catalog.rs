//! Stored models and evaluation sets: one row per distinct file (SHA-256).

use sqlx::Row;
use sqlx::sqlite::SqliteRow;
use uuid::Uuid;

use super::{DatasetRecord, ModelRecord, Page, Store, StoreError, fmt_time, page, parse_time};

macro_rules! model_columns {
    () => {
        "id, name, sha256, bytes, info, created_at"
    };
}

macro_rules! dataset_columns {
    () => {
        "id, name, sha256, bytes, samples, has_labels, arrays, created_at"
    };
}

fn model_from_row(row: &SqliteRow) -> Result<ModelRecord, StoreError> {
    Ok(ModelRecord {
        id: Uuid::parse_str(row.try_get("id")?)?,
        name: row.try_get("name")?,
        sha256: row.try_get("sha256")?,
        bytes: row.try_get::<i64, _>("bytes")? as u64,
        info: serde_json::from_str(row.try_get("info")?)?,
        created_at: parse_time(row.try_get("created_at")?)?,
    })
}

fn dataset_from_row(row: &SqliteRow) -> Result<DatasetRecord, StoreError> {
    Ok(DatasetRecord {
        id: Uuid::parse_str(row.try_get("id")?)?,
        name: row.try_get("name")?,
        sha256: row.try_get("sha256")?,
        bytes: row.try_get::<i64, _>("bytes")? as u64,
        samples: row.try_get::<i64, _>("samples")? as u64,
        has_labels: row.try_get::<i64, _>("has_labels")? != 0,
        arrays: serde_json::from_str(row.try_get("arrays")?)?,
        created_at: parse_time(row.try_get("created_at")?)?,
    })
}

impl Store {
    /// Inserts a model unless one with the same SHA-256 exists; returns the
    /// stored record and whether it is new. The first name given is kept.
    pub async fn insert_model(&self, m: &ModelRecord) -> Result<(ModelRecord, bool), StoreError> {
        let inserted = sqlx::query(concat!(
            "INSERT INTO models (",
            model_columns!(),
            ") VALUES (?1, ?2, ?3, ?4, ?5, ?6) ON CONFLICT (sha256) DO NOTHING"
        ))
        .bind(m.id.to_string())
        .bind(&m.name)
        .bind(&m.sha256)
        .bind(m.bytes as i64)
        .bind(serde_json::to_string(&m.info)?)
        .bind(fmt_time(m.created_at))
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
        let row = sqlx::query(concat!(
            "SELECT ",
            model_columns!(),
            " FROM models WHERE id = ?1"
        ))
        .bind(id.to_string())
        .fetch_optional(&self.pool)
        .await?;
        row.as_ref().map(model_from_row).transpose()
    }

    pub async fn model_by_sha(&self, sha256: &str) -> Result<Option<ModelRecord>, StoreError> {
        let row = sqlx::query(concat!(
            "SELECT ",
            model_columns!(),
            " FROM models WHERE sha256 = ?1"
        ))
        .bind(sha256)
        .fetch_optional(&self.pool)
        .await?;
        row.as_ref().map(model_from_row).transpose()
    }

    /// Models newest first, optionally only the one with a given SHA-256.
    pub async fn list_models(
        &self,
        sha256: Option<&str>,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<ModelRecord>, StoreError> {
        let rows = sqlx::query(concat!(
            "SELECT ",
            model_columns!(),
            " FROM models WHERE (?1 IS NULL OR sha256 = ?1) AND (?2 IS NULL OR id < ?2)",
            " ORDER BY id DESC LIMIT ?3"
        ))
        .bind(sha256)
        .bind(cursor.map(|c| c.to_string()))
        .bind(limit as i64 + 1)
        .fetch_all(&self.pool)
        .await?;
        let items = rows
            .iter()
            .map(model_from_row)
            .collect::<Result<Vec<_>, _>>()?;
        Ok(page(items, limit, |m| m.id.to_string()))
    }

    pub async fn insert_dataset(
        &self,
        d: &DatasetRecord,
    ) -> Result<(DatasetRecord, bool), StoreError> {
        let inserted = sqlx::query(concat!(
            "INSERT INTO datasets (",
            dataset_columns!(),
            ") VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8) ON CONFLICT (sha256) DO NOTHING"
        ))
        .bind(d.id.to_string())
        .bind(&d.name)
        .bind(&d.sha256)
        .bind(d.bytes as i64)
        .bind(d.samples as i64)
        .bind(d.has_labels as i64)
        .bind(serde_json::to_string(&d.arrays)?)
        .bind(fmt_time(d.created_at))
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
        let row = sqlx::query(concat!(
            "SELECT ",
            dataset_columns!(),
            " FROM datasets WHERE id = ?1"
        ))
        .bind(id.to_string())
        .fetch_optional(&self.pool)
        .await?;
        row.as_ref().map(dataset_from_row).transpose()
    }

    pub async fn dataset_by_sha(&self, sha256: &str) -> Result<Option<DatasetRecord>, StoreError> {
        let row = sqlx::query(concat!(
            "SELECT ",
            dataset_columns!(),
            " FROM datasets WHERE sha256 = ?1"
        ))
        .bind(sha256)
        .fetch_optional(&self.pool)
        .await?;
        row.as_ref().map(dataset_from_row).transpose()
    }

    pub async fn list_datasets(
        &self,
        sha256: Option<&str>,
        limit: u32,
        cursor: Option<Uuid>,
    ) -> Result<Page<DatasetRecord>, StoreError> {
        let rows = sqlx::query(concat!(
            "SELECT ",
            dataset_columns!(),
            " FROM datasets WHERE (?1 IS NULL OR sha256 = ?1) AND (?2 IS NULL OR id < ?2)",
            " ORDER BY id DESC LIMIT ?3"
        ))
        .bind(sha256)
        .bind(cursor.map(|c| c.to_string()))
        .bind(limit as i64 + 1)
        .fetch_all(&self.pool)
        .await?;
        let items = rows
            .iter()
            .map(dataset_from_row)
            .collect::<Result<Vec<_>, _>>()?;
        Ok(page(items, limit, |d| d.id.to_string()))
    }
}
