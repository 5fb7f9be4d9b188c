//! [`Blobs`]: dataset bytes in a shared object store, addressed by their SHA-256, with an
//! optional local cache on each worker.
//!
//! The location is a URL: `file:///shared/dir` (a directory every process can reach — the
//! default for one machine or a shared volume) or `s3://bucket/prefix` (any S3-compatible
//! server; credentials, region and endpoint come from the usual `AWS_*` environment variables,
//! e.g. `AWS_ENDPOINT` and `AWS_ALLOW_HTTP=true` for a local server). Objects are written once
//! under `datasets/<sha256>` and never changed, so a cached copy is valid for ever once its hash
//! has been checked.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use object_store::path::Path as ObjectPath;
use object_store::{ObjectStore, ObjectStoreExt, PutPayload};
use sha2::{Digest, Sha256};
use url::Url;

use crate::error::StoreError;

/// Dataset bytes by content hash.
#[derive(Clone, Debug)]
pub struct Blobs {
    store: Arc<dyn ObjectStore>,
    prefix: ObjectPath,
    cache: Option<PathBuf>,
    location: String,
}

fn blob_error(e: impl std::fmt::Display) -> StoreError {
    StoreError::Blobs(e.to_string())
}

/// Lower-case hex SHA-256 of `bytes`.
pub(crate) fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

impl Blobs {
    /// Opens the blob store at `location` (see the module documentation). A `file://`
    /// directory is created if missing.
    ///
    /// # Errors
    /// [`StoreError::Blobs`] for a URL that is not `file://` or `s3://`, or a directory that
    /// cannot be created.
    pub fn open(location: &str) -> Result<Self, StoreError> {
        let url = Url::parse(location).map_err(|e| {
            StoreError::Blobs(format!(
                "{location:?} is not a URL ({e}); give file:///absolute/dir or s3://bucket/prefix"
            ))
        })?;
        match url.scheme() {
            "file" => {
                let dir = url.to_file_path().map_err(|()| {
                    StoreError::Blobs(format!("{location:?} does not name a local directory"))
                })?;
                std::fs::create_dir_all(&dir).map_err(|source| StoreError::Io {
                    action: "create",
                    path: dir.display().to_string(),
                    source,
                })?;
            }
            "s3" => {}
            other => {
                return Err(StoreError::Blobs(format!(
                    "blob store scheme {other:?} is not supported; use file:// or s3://"
                )));
            }
        }
        // Standard AWS_* variables, lower-cased, are the S3 builder's configuration keys.
        let options = std::env::vars()
            .filter(|(k, _)| k.starts_with("AWS_"))
            .map(|(k, v)| (k.to_ascii_lowercase(), v));
        let (store, prefix) = object_store::parse_url_opts(&url, options).map_err(blob_error)?;
        Ok(Blobs {
            store: Arc::from(store),
            prefix,
            cache: None,
            location: location.to_string(),
        })
    }

    /// A local directory where fetched blobs are kept (created if missing), so a worker
    /// downloads each dataset once.
    ///
    /// # Errors
    /// [`StoreError::Io`] if the directory cannot be created.
    pub fn with_cache(mut self, dir: &Path) -> Result<Self, StoreError> {
        std::fs::create_dir_all(dir).map_err(|source| StoreError::Io {
            action: "create",
            path: dir.display().to_string(),
            source,
        })?;
        self.cache = Some(dir.to_path_buf());
        Ok(self)
    }

    /// The location this store was opened at.
    pub fn location(&self) -> &str {
        &self.location
    }

    fn object(&self, sha256: &str) -> ObjectPath {
        self.prefix.clone().join("datasets").join(sha256)
    }

    /// Stores `bytes` under their hash `sha256` (already computed by the caller).
    ///
    /// # Errors
    /// [`StoreError::Blobs`] if the store refuses the write.
    pub async fn put(&self, sha256: &str, bytes: Vec<u8>) -> Result<(), StoreError> {
        let path = self.object(sha256);
        if self.store.head(&path).await.is_ok() {
            return Ok(());
        }
        self.store
            .put(&path, PutPayload::from(bytes))
            .await
            .map(|_| ())
            .map_err(blob_error)
    }

    /// The bytes stored under `sha256`, from the cache when it has them; `None` if the store
    /// has no such object. Fetched bytes are checked against the hash before use.
    ///
    /// # Errors
    /// [`StoreError::Blobs`] for a failed read, and [`StoreError::Corrupt`] for bytes whose
    /// hash differs.
    pub async fn get(&self, sha256: &str) -> Result<Option<Vec<u8>>, StoreError> {
        if let Some(dir) = &self.cache {
            let cached = dir.join(sha256);
            if let Ok(bytes) = tokio::fs::read(&cached).await {
                if sha256_hex(&bytes) == sha256 {
                    return Ok(Some(bytes));
                }
                tracing::warn!(path = %cached.display(), "cached dataset has the wrong hash; fetching it again");
            }
        }
        let bytes = match self.store.get(&self.object(sha256)).await {
            Ok(got) => got.bytes().await.map_err(blob_error)?.to_vec(),
            Err(object_store::Error::NotFound { .. }) => return Ok(None),
            Err(e) => return Err(blob_error(e)),
        };
        if sha256_hex(&bytes) != sha256 {
            return Err(StoreError::Corrupt(format!(
                "blob {sha256} in {} holds other bytes",
                self.location
            )));
        }
        if let Some(dir) = &self.cache {
            let dir = dir.clone();
            let name = sha256.to_string();
            let copy = bytes.clone();
            // Written beside and renamed into place, so a reader never sees half a file.
            let kept = tokio::task::spawn_blocking(move || -> std::io::Result<()> {
                let mut tmp = tempfile::NamedTempFile::new_in(&dir)?;
                std::io::Write::write_all(&mut tmp, &copy)?;
                tmp.persist(dir.join(name)).map_err(|e| e.error)?;
                Ok(())
            })
            .await;
            if !matches!(kept, Ok(Ok(()))) {
                tracing::warn!(
                    "cannot keep a fetched dataset in the cache; it is fetched again next time"
                );
            }
        }
        Ok(Some(bytes))
    }

    /// Removes the object stored under `sha256`, if any.
    ///
    /// # Errors
    /// [`StoreError::Blobs`] if the store refuses the delete.
    pub async fn delete(&self, sha256: &str) -> Result<(), StoreError> {
        match self.store.delete(&self.object(sha256)).await {
            Ok(()) | Err(object_store::Error::NotFound { .. }) => Ok(()),
            Err(e) => Err(blob_error(e)),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[tokio::test]
    async fn blobs_round_trip_through_a_directory_and_the_cache() {
        let shared = tempfile::tempdir().unwrap();
        let cache = tempfile::tempdir().unwrap();
        let url = Url::from_directory_path(shared.path()).unwrap().to_string();
        let blobs = Blobs::open(&url).unwrap().with_cache(cache.path()).unwrap();
        let bytes = b"a,b\n1,2\n".to_vec();
        let hash = sha256_hex(&bytes);
        assert_eq!(blobs.get(&hash).await.unwrap(), None);
        blobs.put(&hash, bytes.clone()).await.unwrap();
        assert_eq!(blobs.get(&hash).await.unwrap(), Some(bytes.clone()));
        assert!(
            cache.path().join(&hash).exists(),
            "fetched bytes are cached"
        );
        // A corrupted cache entry is noticed and replaced from the shared store.
        std::fs::write(cache.path().join(&hash), b"tampered").unwrap();
        assert_eq!(blobs.get(&hash).await.unwrap(), Some(bytes));
        blobs.delete(&hash).await.unwrap();
        let uncached = Blobs::open(&url).unwrap();
        assert_eq!(uncached.get(&hash).await.unwrap(), None);
    }

    #[test]
    fn unsupported_locations_name_the_fix() {
        let e = Blobs::open("ftp://host/x").unwrap_err().to_string();
        assert!(e.contains("use file:// or s3://"), "{e}");
        let e = Blobs::open("just-a-dir").unwrap_err().to_string();
        assert!(e.contains("file:///absolute/dir"), "{e}");
    }
}
