//! What the engine needs for an evaluation, from the stored records: the
//! files' paths beside the ids, names and hashes the report names.

use uuid::Uuid;

use super::{AppliedRequest, BlobKind, Store, StoreError};
use crate::engine::{DatasetRef, Job, ModelRef};

impl Store {
    /// The engine's job for an evaluation stored (or about to be) with this
    /// request.
    pub async fn job_for(
        &self,
        id: Uuid,
        created_at: time::OffsetDateTime,
        request: &AppliedRequest,
    ) -> Result<Job, StoreError> {
        let missing =
            |what: String| StoreError::Corrupt(format!("{what} is referenced but not stored"));
        let model = |id: Uuid| async move {
            let m = self
                .model(id)
                .await?
                .ok_or_else(|| missing(format!("model {id}")))?;
            Ok::<_, StoreError>(ModelRef {
                path: self.blobs.fetch(BlobKind::Model, &m.sha256).await?,
                id: m.id,
                name: m.name,
                sha256: m.sha256,
                bytes: m.bytes,
            })
        };
        let teacher = model(request.teacher).await?;
        let baseline = match request.baseline {
            Some(b) => Some(model(b).await?),
            None => None,
        };
        let mut students = Vec::with_capacity(request.students.len());
        for &sid in &request.students {
            students.push(model(sid).await?);
        }
        let d = self
            .dataset(request.dataset)
            .await?
            .ok_or_else(|| missing(format!("dataset {}", request.dataset)))?;
        Ok(Job {
            evaluation: id,
            project: request.project.clone(),
            created_at,
            teacher,
            baseline,
            students,
            dataset: DatasetRef {
                path: self.blobs.fetch(BlobKind::Dataset, &d.sha256).await?,
                id: d.id,
                name: d.name,
                sha256: d.sha256,
            },
            settings: request.settings.clone(),
            claimed_at: None,
            worker: None,
        })
    }

    /// The engine's job for a stored evaluation.
    pub async fn job(&self, e: &super::EvaluationRecord) -> Result<Job, StoreError> {
        self.job_for(e.id, e.created_at, &e.request).await
    }
}
