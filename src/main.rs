//! The browser entry point: mount the app.

fn main() {
    // A panic is recorded so the next start opens the recovery screen, not a blank page.
    std::panic::set_hook(Box::new(|info| {
        cuvette::store::note_crash(&info.to_string());
        console_error_panic_hook::hook(info);
    }));
    leptos::mount::mount_to_body(cuvette::ui::App);
}
