//! What `train` and `verify` show on stderr while they work: the header at once, then on a
//! terminal a live bar, otherwise one plain line per finished run; waits for another writer's
//! lock always. Part of the binary: the library only emits [`Event`]s.

use std::io::IsTerminal;

use tabcard::metrics::registry::{self, Direction};
use tabcard::sweep::Event;

/// One line on stderr; a closed stderr (`tabcard train ... 2>&1 | head`) must not stop the work.
pub fn note(text: &str) {
    use std::io::Write;
    let _ = writeln!(std::io::stderr(), "{text}");
}

/// Progress on stderr while `train` or `verify` works: the header at once; on a terminal a live
/// bar (runs done of planned, best validation value so far, elapsed, estimate); otherwise one
/// plain line per finished run (logs, SLURM). `--quiet` shows neither.
pub fn progress_display(quiet: bool) -> (indicatif::ProgressBar, impl Fn(Event) + Sync) {
    let terminal = std::io::stderr().is_terminal() && !quiet;
    // Drawn only once the runs to train are known, and only when there are some: a bar of 0/0
    // runs would show as full before anything happened.
    let bar = indicatif::ProgressBar::hidden();
    bar.set_style(
        indicatif::ProgressStyle::with_template("{bar:30} {pos}/{len} runs  {msg}  {elapsed} elapsed, about {eta} left")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    struct State {
        done: usize,
        pending: usize,
        failed: usize,
        metric: String,
        direction: Direction,
        best: Option<(f64, String)>,
    }
    let state =
        std::sync::Mutex::new(State { done: 0, pending: 0, failed: 0, metric: String::new(), direction: Direction::Maximise, best: None });
    let handle = bar.clone();
    let on_event = move |event: Event| {
        let Ok(mut s) = state.lock() else { return };
        match event {
            Event::Header(text) => {
                if !quiet {
                    handle.suspend(|| note(&text));
                }
            }
            // Shown even under --quiet: a command that waits must say for whom, or it looks hung.
            Event::Waiting(text) => handle.suspend(|| note(&text)),
            Event::Planned { pending, reused, metric, direction, retraining } => {
                (s.pending, s.metric, s.direction) = (pending, metric, direction);
                handle.set_length(pending as u64);
                if terminal && pending > 0 {
                    handle.set_draw_target(indicatif::ProgressDrawTarget::stderr());
                }
                if !quiet && !terminal {
                    if retraining {
                        note(&format!("{pending} runs to retrain and compare with the stored ones"));
                    } else {
                        note(&format!("{pending} runs to train, {reused} already stored"));
                    }
                }
            }
            Event::Finished(run) => {
                s.done += 1;
                if !run.outcome.is_completed() {
                    s.failed += 1;
                }
                if let Some(v) = run.metric {
                    let better = s.best.as_ref().is_none_or(|(b, _)| registry::better(s.direction, v, *b));
                    if better {
                        s.best = Some((v, format!("{} seed {}", run.label, run.seed)));
                    }
                }
                let metric = match run.metric {
                    Some(v) => format!("validation {} {}", s.metric, tabcard::format::fixed(v, 4)),
                    None => format!("validation {} undefined", s.metric),
                };
                let outcome = if run.outcome.is_completed() { "completed".to_string() } else { run.outcome.describe() };
                let verdict = run.verdict.map(|v| format!(", {v}")).unwrap_or_default();
                if terminal {
                    let best = s
                        .best
                        .as_ref()
                        .map(|(v, who)| {
                            // One run's value: selection compares configurations by their seed means.
                            format!(
                                "best single run {} {} ({})",
                                s.metric,
                                tabcard::format::fixed(*v, 4),
                                tabcard::text::terminal_cell(who, 40)
                            )
                        })
                        .unwrap_or_default();
                    let failed = if s.failed > 0 { format!(", {} failed", s.failed) } else { String::new() };
                    handle.set_message(format!("{best}{failed}"));
                    handle.inc(1);
                } else if !quiet {
                    note(&format!(
                        "[{}/{}] run {} seed {} {}: {outcome}, {metric}, {:.1} s{verdict}",
                        s.done,
                        s.pending,
                        run.run_id,
                        run.seed,
                        tabcard::text::terminal_safe(&run.label),
                        run.seconds
                    ));
                }
            }
        }
    };
    (bar, on_event)
}
