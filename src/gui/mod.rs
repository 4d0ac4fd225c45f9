//! The desktop app (eframe). [`state`] holds the app's logic without drawing, [`jobs`]
//! runs long work on worker threads, [`app`] is the frame loop and `views` draw.

pub mod app;
pub mod command;
pub mod dialogs;
pub mod jobs;
pub mod matrix_edit;
pub mod source_edit;
pub mod state;
pub mod verdict_book;
mod views;

use std::path::{Path, PathBuf};

pub use app::FlipmendApp;

use crate::error::{Error, Result};
use crate::io::session::Roles;
use command::Command;

/// The demo table, built into the binary so `flipmend demo` works from any folder.
/// An invented scenario (see demo-data/README.md).
pub const DEMO_CSV: &[u8] = include_bytes!("../../demo-data/recycling.csv");

/// What to open at start.
#[derive(Debug, Clone, Default)]
pub struct Launch {
    /// A table to load.
    pub data: Option<PathBuf>,
    /// Probabilities for it.
    pub probs: Option<PathBuf>,
    /// A session to restore (wins over `data`).
    pub session: Option<PathBuf>,
    /// Roles for `data`.
    pub roles: Roles,
}

impl Launch {
    /// The commands that open what was asked for.
    pub fn commands(&self) -> Vec<Command> {
        let mut commands = Vec::new();
        if let Some(session) = &self.session {
            commands.push(Command::OpenSession(session.clone()));
        } else if let Some(data) = &self.data {
            commands.push(Command::LoadData(data.clone(), self.roles.clone()));
        }
        commands
    }
}

/// Writes the built-in demo table to `dir` (unless an identical copy is there) and
/// returns its path; the app reads it from there like any other file, so reviewed
/// worklists can be merged into a copy of it.
pub fn demo_file(dir: &Path) -> Result<PathBuf> {
    let path = dir.join("flipmend-demo-recycling.csv");
    if std::fs::read(&path).is_ok_and(|existing| existing == DEMO_CSV) {
        return Ok(path);
    }
    std::fs::create_dir_all(dir).map_err(|source| Error::Write {
        path: dir.to_path_buf(),
        source,
    })?;
    crate::io::write_atomic(&path, |w| w.write_all(DEMO_CSV))?;
    Ok(path)
}

/// The launch for `flipmend demo`.
pub fn demo_launch() -> Result<Launch> {
    let dir = std::env::temp_dir().join(format!("flipmend-{}", env!("CARGO_PKG_VERSION")));
    // The invented stations differ by design, so the demo opens with them as the label
    // source: the Sources view and the per-station matrices have something to show.
    Ok(Launch {
        data: Some(demo_file(&dir)?),
        roles: crate::io::session::Roles {
            source: Some("station".into()),
            ..Default::default()
        },
        ..Launch::default()
    })
}

/// Opens the window and runs until it is closed.
pub fn run(launch: Launch) -> Result<()> {
    let started = std::time::Instant::now();
    // Maximised: the matrix, the suspects table and the Overview want the whole screen.
    // The inner size is what a window manager that ignores maximising gives; the
    // minimum keeps every view usable. Screen readers get the widget tree through
    // eframe's accesskit feature (Cargo.toml).
    let options = eframe::NativeOptions {
        viewport: eframe::egui::ViewportBuilder::default()
            .with_title("flipmend")
            .with_maximized(true)
            .with_inner_size([1280.0, 820.0])
            .with_min_inner_size([720.0, 480.0])
            .with_drag_and_drop(true),
        ..Default::default()
    };
    let mut launch = launch;
    eframe::run_native(
        "flipmend",
        options,
        Box::new(move |cc| {
            let mut app = FlipmendApp::from_creation(cc);
            app.time_first_frame(started);
            if let Some(probs) = launch.probs.take() {
                app.push(Command::UseProbabilitiesFile(probs));
            }
            for command in launch.commands() {
                app.push(command);
            }
            app.apply_commands();
            Ok(Box::new(app))
        }),
    )
    .map_err(|e| Error::Internal(format!("the window could not be opened: {e}. Is a display available (DISPLAY or WAYLAND_DISPLAY)? The command-line commands work without one.")))
}
