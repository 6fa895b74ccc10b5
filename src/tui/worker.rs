//! The calibration on its own thread, so the screen stays responsive: progress and the result come
//! back over a channel; an atomic flag cancels.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::mpsc::{self, Receiver, TryRecvError};
use std::thread::JoinHandle;

use crate::calibrate::{CalibrationError, CalibrationResult, IterationReport, calibrate};

use super::app::Action;
use super::state::fit::CalibrationJob;

/// What the worker sends.
#[derive(Debug)]
pub enum WorkerMessage {
    Progress(IterationReport),
    Finished(Box<Result<CalibrationResult, CalibrationError>>),
}

impl WorkerMessage {
    /// The message as a workbench action.
    pub fn into_action(self) -> Action {
        match self {
            Self::Progress(report) => Action::CalibrationProgress(report),
            Self::Finished(result) => Action::CalibrationFinished(result),
        }
    }
}

/// A running calibration.
pub struct CalibrationWorker {
    receiver: Receiver<WorkerMessage>,
    cancel: Arc<AtomicBool>,
    handle: Option<JoinHandle<()>>,
}

impl CalibrationWorker {
    /// Starts `job` on a new thread.
    pub fn spawn(job: CalibrationJob) -> Self {
        let (sender, receiver) = mpsc::channel();
        let cancel = Arc::new(AtomicBool::new(false));
        let flag = Arc::clone(&cancel);
        let handle = std::thread::spawn(move || {
            let progress_sender = sender.clone();
            let mut progress = |report: &IterationReport| {
                let _ = progress_sender.send(WorkerMessage::Progress(report.clone()));
            };
            let result = calibrate(&job.network, &job.tests, &job.options, &mut progress, &flag);
            let _ = sender.send(WorkerMessage::Finished(Box::new(result)));
        });
        Self {
            receiver,
            cancel,
            handle: Some(handle),
        }
    }

    /// Asks the run to stop at its next model evaluation.
    pub fn cancel(&self) {
        self.cancel.store(true, Ordering::Relaxed);
    }

    /// Messages received so far, without waiting; `finished` tells whether the run is over.
    pub fn drain(&mut self) -> (Vec<WorkerMessage>, bool) {
        let mut messages = Vec::new();
        let mut finished = false;
        loop {
            match self.receiver.try_recv() {
                Ok(message) => {
                    finished |= matches!(message, WorkerMessage::Finished(_));
                    messages.push(message);
                }
                Err(TryRecvError::Empty) => break,
                Err(TryRecvError::Disconnected) => {
                    if !finished {
                        // The thread ended without a result: it panicked.
                        messages.push(WorkerMessage::Finished(Box::new(Err(
                            CalibrationError::Optimizer(
                                "the calibration stopped unexpectedly".to_string(),
                            ),
                        ))));
                    }
                    finished = true;
                    break;
                }
            }
        }
        if finished && let Some(handle) = self.handle.take() {
            let _ = handle.join();
        }
        (messages, finished)
    }

    /// Waits for the next message (for tests and shutdown).
    pub fn recv_timeout(&self, timeout: std::time::Duration) -> Option<WorkerMessage> {
        self.receiver.recv_timeout(timeout).ok()
    }
}

impl Drop for CalibrationWorker {
    fn drop(&mut self) {
        self.cancel();
    }
}
