//! Hearing-safety events: what safety did to a plan or a unit, as a typed value.
//!
//! Every refusal, scale-down, abandoned sweep, guard trip and dose decision is made where it
//! happens (the budget, the pilot, the guard, the dose ledger) as a [`SafetyEvent`] whose
//! [`SafetyKind`] is fixed there. The store keeps the kind by its fixed word
//! ([`SafetyKind::word`]), so rewording a message never changes what an audit finds.

/// What happened, as stored in `kind`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SafetyKind {
    /// A plan refused before anything played (its worst case could pass a cap).
    PlanRefused,
    /// The pilot tone showed a unit more sensitive than declared; the sweep was played lower.
    SweepScaledDown,
    /// The sweep was not played at all (pilot showed too much, or no signal).
    SweepAbandoned,
    /// The run-time guard saw a level past a cap and faded the output to silence.
    GuardTripped,
    /// A listening step was played quieter than planned: at its planned level it would have
    /// passed the A-weighted cap at the reference position or the guard's limit.
    ListeningScaledDown,
    /// A listening step pushed an operator's dose to or past the warning threshold.
    DoseWarning,
    /// A listening step was refused because an operator's dose would pass the refusal
    /// threshold.
    DoseRefused,
}

impl SafetyKind {
    /// Every kind, in the order of the issue.
    pub const ALL: [SafetyKind; 7] = [
        SafetyKind::PlanRefused,
        SafetyKind::SweepScaledDown,
        SafetyKind::SweepAbandoned,
        SafetyKind::GuardTripped,
        SafetyKind::ListeningScaledDown,
        SafetyKind::DoseWarning,
        SafetyKind::DoseRefused,
    ];

    /// The word stored and hashed, e.g. `guard_tripped`.
    pub fn word(self) -> &'static str {
        match self {
            SafetyKind::PlanRefused => "plan_refused",
            SafetyKind::SweepScaledDown => "sweep_scaled_down",
            SafetyKind::SweepAbandoned => "sweep_abandoned",
            SafetyKind::GuardTripped => "guard_tripped",
            SafetyKind::ListeningScaledDown => "listening_scaled_down",
            SafetyKind::DoseWarning => "dose_warning",
            SafetyKind::DoseRefused => "dose_refused",
        }
    }

    /// Inverse of [`word`](Self::word); `None` for anything else.
    pub fn from_word(s: &str) -> Option<SafetyKind> {
        SafetyKind::ALL.into_iter().find(|k| k.word() == s)
    }
}

/// One safety event: its kind, its words for people and its numbers for machines.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SafetyEvent {
    /// What happened (stored by its fixed word).
    pub kind: SafetyKind,
    /// What happened, in words.
    pub message: String,
    /// The numbers behind it, JSON text (`{}` when there are none).
    pub detail_json: String,
}

impl SafetyEvent {
    /// An event with its numbers as JSON (`{}` if they cannot be written).
    pub fn new(
        kind: SafetyKind,
        message: impl Into<String>,
        detail: &impl serde::Serialize,
    ) -> Self {
        SafetyEvent {
            kind,
            message: message.into(),
            detail_json: to_json(detail),
        }
    }
}

/// A value as JSON text for an event's numbers (`{}` if it cannot be written).
pub fn to_json<T: serde::Serialize + ?Sized>(v: &T) -> String {
    serde_json::to_string(v).unwrap_or_else(|_| "{}".into())
}
