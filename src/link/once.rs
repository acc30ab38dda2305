//! A stream handed over once: the in-process simulator's end of a duplex pipe, or a test's.
//! It cannot be reopened; a second open reports [`LinkError::Used`], which is not retried.

use std::sync::Mutex;

use futures::future::BoxFuture;

use super::{BoxStream, Link, LinkError};

/// A link whose stream already exists.
pub struct OnceLink {
    stream: Mutex<Option<BoxStream>>,
}

impl OnceLink {
    /// Wraps an open stream.
    pub fn new(stream: BoxStream) -> Self {
        Self { stream: Mutex::new(Some(stream)) }
    }
}

impl Link for OnceLink {
    fn open(&self) -> BoxFuture<'static, Result<BoxStream, LinkError>> {
        let taken = self.stream.lock().unwrap_or_else(std::sync::PoisonError::into_inner).take();
        Box::pin(std::future::ready(taken.ok_or(LinkError::Used)))
    }

    fn describe(&self) -> String {
        "in-process link".to_owned()
    }
}
