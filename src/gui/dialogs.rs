//! Native file dialogs, always on a worker thread: a desktop portal that misbehaves can
//! block a dialog call for half a minute, and the window must keep painting meanwhile.
//! Every dialog has a typed-path field beside it for machines with no dialog service.

use std::path::PathBuf;
use std::sync::mpsc::{channel, Receiver, Sender};

/// What a chosen path is for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Purpose {
    /// A labelled table to load.
    OpenData,
    /// A probability file (CSV, .npy, Parquet or Arrow IPC).
    OpenProbabilities,
    /// A matrix CSV to import.
    ImportMatrix,
    /// Where to export the matrix CSV.
    ExportMatrix,
    /// Where to write the worklist.
    ExportWorklist,
    /// A reviewed worklist.
    ImportReview,
    /// Where to write the merged data.
    SaveMerged,
    /// A labelled test table for retraining.
    OpenTest,
    /// Where to save a model.
    SaveModel,
    /// A session to open.
    OpenSession,
    /// Where to save the session.
    SaveSession,
    /// Where to write the verdicts given in the app.
    ExportVerdicts,
}

impl Purpose {
    /// True for dialogs that choose a file to write.
    pub fn saves(self) -> bool {
        matches!(
            self,
            Purpose::ExportMatrix
                | Purpose::ExportWorklist
                | Purpose::SaveMerged
                | Purpose::SaveModel
                | Purpose::SaveSession
                | Purpose::ExportVerdicts
        )
    }

    /// The file name a save dialog proposes, and the extensions it filters on.
    fn file(self) -> (&'static str, &'static [&'static str]) {
        match self {
            Purpose::OpenData | Purpose::OpenTest => (
                "data.csv",
                &[
                    "csv", "tsv", "txt", "parquet", "pq", "feather", "arrow", "ipc",
                ],
            ),
            Purpose::OpenProbabilities => (
                "probs.csv",
                &[
                    "csv", "tsv", "npy", "parquet", "pq", "feather", "arrow", "ipc",
                ],
            ),
            Purpose::ImportMatrix | Purpose::ExportMatrix => ("flip-matrix.csv", &["csv"]),
            Purpose::ExportWorklist => ("worklist.csv", &["csv", "parquet"]),
            Purpose::ImportReview => ("worklist.csv", &["csv"]),
            Purpose::ExportVerdicts => ("worklist-reviewed.csv", &["csv"]),
            Purpose::SaveMerged => ("data-reviewed.csv", &["csv", "tsv", "parquet"]), // see merged_name
            Purpose::SaveModel => ("model.json", &["json"]),
            Purpose::OpenSession | Purpose::SaveSession => ("session.json", &["json"]),
        }
    }
}

/// The name the Save merged dialog proposes for the table at `data`: the table's own
/// name with `-reviewed`, in the kind the merged copy must have (Parquet for a columnar
/// table, CSV for a CSV one), so the proposal is never refused.
pub fn merged_name(data: &std::path::Path) -> String {
    let stem = data
        .file_stem()
        .map_or("data".into(), |s| s.to_string_lossy().into_owned());
    let extension = if crate::io::columnar::Format::of(data).is_columnar() {
        "parquet"
    } else if data
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("tsv"))
    {
        "tsv"
    } else {
        "csv"
    };
    format!("{stem}-reviewed.{extension}")
}

/// Opens dialogs on worker threads and collects the answers.
pub struct Dialogs {
    sender: Sender<(Purpose, Option<PathBuf>)>,
    receiver: Receiver<(Purpose, Option<PathBuf>)>,
    /// Dialogs still open.
    pub open: usize,
}

impl Default for Dialogs {
    fn default() -> Self {
        let (sender, receiver) = channel();
        Dialogs {
            sender,
            receiver,
            open: 0,
        }
    }
}

impl Dialogs {
    /// Shows a dialog for `purpose`, a save dialog proposing `proposed` (else the
    /// purpose's own name); the answer arrives through [`Dialogs::poll`].
    pub fn request(
        &mut self,
        purpose: Purpose,
        proposed: Option<String>,
        ctx: &eframe::egui::Context,
    ) {
        let sender = self.sender.clone();
        let ctx = ctx.clone();
        self.open += 1;
        let spawned = std::thread::Builder::new()
            .name("flipmend-dialog".into())
            .spawn(move || {
                let (default_name, extensions) = purpose.file();
                let name = proposed.unwrap_or_else(|| default_name.to_string());
                let dialog = rfd::FileDialog::new().add_filter("files", extensions);
                let dialog = match std::env::current_dir() {
                    Ok(dir) => dialog.set_directory(dir),
                    Err(_) => dialog,
                };
                let chosen = if purpose.saves() {
                    dialog.set_file_name(name).save_file()
                } else {
                    dialog.pick_file()
                };
                let _ = sender.send((purpose, chosen));
                ctx.request_repaint();
            });
        if spawned.is_err() {
            self.open -= 1;
        }
    }

    /// Answers that arrived (a cancelled dialog gives none).
    pub fn poll(&mut self) -> Vec<(Purpose, PathBuf)> {
        let mut chosen = Vec::new();
        while let Ok((purpose, path)) = self.receiver.try_recv() {
            self.open = self.open.saturating_sub(1);
            chosen.extend(path.map(|p| (purpose, p)));
        }
        chosen
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_merged_copy_is_proposed_in_the_kind_the_table_needs() {
        use std::path::Path;
        assert_eq!(
            merged_name(Path::new("/d/scans.parquet")),
            "scans-reviewed.parquet"
        );
        assert_eq!(
            merged_name(Path::new("scans.feather")),
            "scans-reviewed.parquet"
        );
        assert_eq!(merged_name(Path::new("scans.tsv")), "scans-reviewed.tsv");
        assert_eq!(merged_name(Path::new("scans.txt")), "scans-reviewed.csv");
    }
}
