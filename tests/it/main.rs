//! The one integration-test binary. Modules share the helpers in `util`.
#![allow(clippy::unwrap_used, missing_docs, unreachable_pub)]

mod util;

mod reference;
