//! The `spurion` binary: with no arguments it opens the desktop inspector on the bundled demo;
//! otherwise see `spurion --help`.

use clap::Parser;

fn main() -> std::process::ExitCode {
    use spurion::cli::{Cli, Command};
    use spurion::gui::{self, GuiOptions};
    // Rust ignores SIGPIPE, so printing into a closed pipe (`spurion ledger show | head`) panics;
    // the default action ends the process quietly, as Unix tools do (common practice).
    #[cfg(unix)]
    // SAFETY: setting a signal's disposition to its default before any thread starts.
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
    let result = match Cli::parse().command {
        None => gui::run(GuiOptions::default()),
        Some(Command::Gui(a)) => gui::run(GuiOptions { model: a.model, paths: a.paths, ledger: a.ledger }),
        Some(command) => spurion::cli::run(command),
    };
    match result {
        Ok(()) => std::process::ExitCode::SUCCESS,
        Err(e) if spurion::model::is_cancelled(&e) => {
            eprintln!("spurion: cancelled; no reading was written");
            std::process::ExitCode::from(130)
        }
        Err(e) => {
            // One paragraph: the chain of causes, outermost first, no backtrace.
            let mut msg = format!("spurion: {e}");
            for cause in e.chain().skip(1) {
                msg.push_str(&format!(": {cause}"));
            }
            eprintln!("{msg}");
            std::process::ExitCode::from(1)
        }
    }
}
