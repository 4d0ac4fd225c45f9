//! Driving the desktop app headless with egui_kittest: the demo loaded, waiting for the
//! background jobs, typing a path. Shared by the GUI test files.

use std::path::{Path, PathBuf};

use egui_kittest::Harness;
use flipmend::gui::app::{FlipmendApp, Persisted};
use flipmend::gui::command::Command;
use flipmend::gui::dialogs::Purpose;
use flipmend::gui::state::AppState;
use flipmend::io::session::Roles;

/// Waits for every background job, then lets the UI catch up.
pub fn settle(h: &mut Harness<'_, FlipmendApp>) {
    h.state_mut().state.settle(600.0);
    h.run_steps(3);
}

/// The app, empty, in a 1400 × 900 window.
pub fn app() -> Harness<'static, FlipmendApp> {
    Harness::builder()
        .with_size([1400.0, 900.0])
        .build_eframe(|cc| FlipmendApp::new(&cc.egui_ctx, Persisted::default()))
}

/// The app with the demo table loaded with `roles`, every job done.
pub fn app_on_demo_as(dir: &Path, roles: Roles) -> Harness<'static, FlipmendApp> {
    let demo = flipmend::gui::demo_file(dir).unwrap();
    let mut h = app();
    h.state_mut().push(Command::LoadData(demo, roles));
    h.run_steps(1);
    settle(&mut h);
    h
}

/// The app with the demo table loaded, every job done.
pub fn app_on_demo(dir: &Path) -> Harness<'static, FlipmendApp> {
    app_on_demo_as(dir, Roles::default())
}

/// The demo with its `station` column as the label source.
pub fn app_on_demo_with_stations(dir: &Path) -> Harness<'static, FlipmendApp> {
    let roles = Roles {
        source: Some("station".into()),
        ..Roles::default()
    };
    app_on_demo_as(dir, roles)
}

/// The app state.
pub fn state<'a>(h: &'a Harness<'_, FlipmendApp>) -> &'a AppState {
    &h.state().state
}

/// Types `path` into the path field of `purpose`.
pub fn set_path(h: &mut Harness<'_, FlipmendApp>, purpose: Purpose, path: &Path) {
    let text: PathBuf = path.to_path_buf();
    *h.state_mut().ui.path(purpose) = text.display().to_string();
    h.run_steps(1);
}
