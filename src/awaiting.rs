//! Runs that await their host functions: the asynchronous entry points.
//!
//! A run whose host function answers later suspends ([`Outcome::Suspended`]);
//! here an `async` caller awaits the answer and resumes the run with it,
//! until the run ends. No executor is assumed and none is a dependency:
//! these are plain futures, polled by whatever runtime the embedder uses (a
//! test drives them with a minimal `block_on`).
//!
//! While a future is awaited the run is held detached ([`Paused::detach`](crate::Paused::detach)),
//! so the futures returned here are `Send` whenever the caller's are: an
//! awaiting run may move between a runtime's worker threads. Detaching and
//! attaching again cost time proportional to the run's state, once per
//! awaited call (and, for [`crate::MachineKind::run_async`], once for the
//! fresh run, which holds next to nothing): a run that never waits runs
//! exactly as [`Paused::resume`](crate::Paused::resume) does.

use std::future::Future;

use crate::machines::MachineKind;
use crate::program::Program;
use crate::vocabulary::{Answer, Detached, HostCall, Limits, Outcome, Report};

impl MachineKind {
    /// Run `program` on a fresh machine of this kind to its end, awaiting
    /// each call of an asynchronous host function
    /// ([`crate::HostFunctions::register_async`]) and resuming the run with
    /// its answer, exactly as if the function had returned it.
    ///
    /// A suspending function registered without a future
    /// ([`crate::HostFunctions::register_suspending`]) gets a `host_error`
    /// answer, since nothing here could answer it; use [`drive_async`] to
    /// answer such calls. On a machine that cannot pause (env), the run ends
    /// at the first waiting call with the `Suspended` outcome, as
    /// [`MachineKind::run`] does.
    ///
    /// # Examples
    ///
    /// ```
    /// use orrery::{Datum, HostFunctions, Limits, MachineKind, Program};
    /// let mut host = HostFunctions::new();
    /// host.register_async("tide_height", 1, |args| {
    ///     Box::pin(async move {
    ///         let Some(Datum::Int(metres)) = args.first() else { return Err("a depth".into()) };
    ///         Ok(Datum::Int(metres * 3))
    ///     })
    /// })
    /// .unwrap();
    /// let program = Program::parse_with("tide_height 4 + 1", &host).unwrap();
    /// for kind in MachineKind::enabled() {
    ///     // Any executor polls it: here a minimal one.
    ///     let report = pollster::block_on(kind.run_async(&program, &Limits::default()));
    ///     match kind.machine().start(&program, &Limits::default()) {
    ///         Some(_) => assert_eq!(report.outcome.value().and_then(|v| v.as_int()), Some(13)),
    ///         None => assert_eq!(report.outcome.name(), "suspended"), // env cannot pause
    ///     }
    /// }
    /// ```
    pub async fn run_async(self, program: &Program, limits: &Limits) -> Report {
        let Some(run) = self.machine().start(program, limits) else {
            return self.run(program, limits);
        };
        let host = program.host();
        drive(run.detach(), |call| host.wait_on(call)).await.0
    }
}

/// Resume `run` until it ends, answering each suspension with the future
/// `ask` returns for its call; the end's report and the run, which reports
/// the same end to every later resume. Fuel for each call is paid when its
/// answer is given, as [`Paused::resume_with`](crate::Paused::resume_with) does.
///
/// # Examples
///
/// ```
/// use orrery::{drive_async, Datum, HostFunctions, Limits, MachineKind, Program};
/// let mut host = HostFunctions::new();
/// host.register_suspending("crew_on_deck", 0).unwrap();
/// let program = Program::parse_with("crew_on_deck + crew_on_deck", &host).unwrap();
/// for kind in MachineKind::enabled() {
///     let Some(run) = kind.machine().start(&program, &Limits::default()) else { continue };
///     let mut asked = 0;
///     let driving = drive_async(run.detach(), |_call| {
///         asked += 1;
///         std::future::ready(Ok(Datum::Int(asked * 10)))
///     });
///     let (report, _run) = pollster::block_on(driving);
///     assert_eq!(report.outcome.value().and_then(|v| v.as_int()), Some(30));
/// }
/// ```
pub async fn drive_async<A, F>(run: Detached, ask: A) -> (Report, Detached)
where
    A: FnMut(HostCall) -> F,
    F: Future<Output = Answer>,
{
    let (report, paused) = drive(run, ask).await;
    (report, paused.detach())
}

/// Resume `run` until it ends, awaiting `ask`'s answer at each suspension:
/// the end's report and the run, on this thread. Only the detached run is
/// held across an await; a run that has ended is not detached again.
async fn drive<A, F>(mut run: Detached, mut ask: A) -> (Report, Box<dyn crate::Paused>)
where
    A: FnMut(HostCall) -> F,
    F: Future<Output = Answer>,
{
    let mut answer = None;
    loop {
        // Bound in one statement, so the attached run is gone before the await.
        let (call, away) = match resumed(run, answer.take()) {
            Stop::Waiting(call, away) => (call, away),
            Stop::Ended(report, paused) => return (report, paused),
        };
        answer = Some(ask(call).await);
        run = away;
    }
}

/// Where a resumed run stopped.
enum Stop {
    /// At a suspension: the call, and the run detached again.
    Waiting(HostCall, Detached),
    /// At its end: the report, and the run as it is.
    Ended(Report, Box<dyn crate::Paused>),
}

/// `run` on this thread again, resumed (with `answer`, if any) until it
/// stops.
fn resumed(run: Detached, answer: Option<Answer>) -> Stop {
    let mut paused = run.attach();
    let report = match answer {
        Some(answer) => paused.resume_with(answer),
        None => paused.resume(0),
    };
    match report.outcome {
        Outcome::Suspended(call) => Stop::Waiting(call, paused.detach()),
        _ => Stop::Ended(report, paused),
    }
}
