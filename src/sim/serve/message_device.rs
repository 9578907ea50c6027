//! What a message-based server (VXI-11, HiSLIP) asks of the simulated instrument behind it:
//! carry out one whole program message, and tell its status byte. The servers know nothing
//! else of the bench, so they serve any instrument that answers messages.

use async_trait::async_trait;

/// An instrument that takes whole program messages.
#[async_trait]
pub trait MessageDevice: Send + Sync + 'static {
    /// Carries out `message` (one or more lines) and returns its response (empty when it has
    /// none); `None` when the connection is to be dropped (an injected fault).
    async fn execute(&self, message: &[u8]) -> Option<Vec<u8>>;
    /// The IEEE 488.2 status byte.
    fn status_byte(&self) -> u8;
}
