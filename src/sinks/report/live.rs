//! The live board: the shift books of the running service's units, where the HTTP pages find
//! them. A unit's report sink registers its book under the site's output directory when it is
//! created and removes it when it is dropped (a reload replaces it), so the pages need no
//! hook into the pipeline: they look the board up by the same output directory.

use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex, OnceLock, PoisonError};

use super::shift::ShiftBook;

/// A shared shift book.
pub type SharedBook = Arc<Mutex<ShiftBook>>;

/// The units' shift books under one output directory.
#[derive(Default)]
pub struct Board {
    units: Mutex<BTreeMap<String, SharedBook>>,
}

impl Board {
    /// Register (or replace) a unit's book.
    pub fn register(&self, name: &str, book: SharedBook) {
        self.units.lock().unwrap_or_else(PoisonError::into_inner).insert(name.to_string(), book);
    }

    /// Remove a unit's book if it is still `book` (a newer one may have replaced it).
    pub fn unregister(&self, name: &str, book: &SharedBook) {
        let mut units = self.units.lock().unwrap_or_else(PoisonError::into_inner);
        if units.get(name).is_some_and(|b| Arc::ptr_eq(b, book)) {
            units.remove(name);
        }
    }

    /// The units and their books, by name.
    pub fn units(&self) -> Vec<(String, SharedBook)> {
        self.units
            .lock()
            .unwrap_or_else(PoisonError::into_inner)
            .iter()
            .map(|(k, v)| (k.clone(), v.clone()))
            .collect()
    }

    /// One unit's book.
    pub fn unit(&self, name: &str) -> Option<SharedBook> {
        self.units.lock().unwrap_or_else(PoisonError::into_inner).get(name).cloned()
    }
}

/// The board of an output directory (created on first use).
pub fn board(output_dir: &Path) -> Arc<Board> {
    static BOARDS: OnceLock<Mutex<HashMap<PathBuf, Arc<Board>>>> = OnceLock::new();
    let boards = BOARDS.get_or_init(Mutex::default);
    boards.lock().unwrap_or_else(PoisonError::into_inner).entry(output_dir.to_path_buf()).or_default().clone()
}
