//! One rule per kind of name: how long it may be and which characters it may hold.
//!
//! Every name a person types (goals, goal sets, cameras, demos, teams, people, token labels, track
//! labels) passes
//! through [`check`], whether it arrives through the JSON API, a page form or the command line,
//! so the same name is accepted or refused the same way everywhere. A name is trimmed, must keep
//! at least one character, may not exceed its kind's length, and may hold neither control
//! characters nor the Unicode bidirectional controls, which can make a name display as something
//! it is not ("Trojan Source", Boucher & Anderson 2021).

/// What a name names; each kind has one length rule.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NameKind {
    /// A goal.
    Goal,
    /// A goal set.
    GoalSet,
    /// A camera.
    Camera,
    /// A team.
    Team,
    /// A person's display name.
    Person,
    /// The label of an API token (which robot or planner holds it).
    TokenLabel,
    /// The label of a track (which point of a demonstration it follows).
    TrackLabel,
    /// A demonstration.
    Demo,
}

/// Longest name of a goal, goal set or camera, in characters.
pub const MAX_THING_NAME_CHARS: usize = 200;
/// Longest team name, display name or token label, in characters (they sit in page headers and
/// lists, where shorter is kinder).
pub const MAX_SHORT_NAME_CHARS: usize = 100;

impl NameKind {
    /// Longest accepted name of this kind, in characters (Unicode scalar values).
    pub const fn max_chars(self) -> usize {
        match self {
            NameKind::Goal | NameKind::GoalSet | NameKind::Camera | NameKind::Demo => {
                MAX_THING_NAME_CHARS
            }
            NameKind::Team | NameKind::Person | NameKind::TokenLabel | NameKind::TrackLabel => {
                MAX_SHORT_NAME_CHARS
            }
        }
    }

    /// The name's owner in words, for messages ("a camera").
    pub const fn what(self) -> &'static str {
        match self {
            NameKind::Goal => "a goal",
            NameKind::GoalSet => "a goal set",
            NameKind::Camera => "a camera",
            NameKind::Team => "a team",
            NameKind::Person => "a person",
            NameKind::TokenLabel => "a token",
            NameKind::TrackLabel => "a track",
            NameKind::Demo => "a demo",
        }
    }
}

/// Why a name was refused.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum NameError {
    /// Nothing left after trimming.
    Empty(NameKind),
    /// Longer than [`NameKind::max_chars`].
    TooLong(NameKind),
    /// Holds a control or bidirectional-control character.
    BadCharacter(NameKind, char),
}

impl NameError {
    /// A snake_case code for error bodies.
    pub fn code(&self) -> &'static str {
        match self {
            NameError::Empty(_) => "required",
            NameError::TooLong(_) => "too_long",
            NameError::BadCharacter(..) => "bad_character",
        }
    }
}

impl std::fmt::Display for NameError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            NameError::Empty(k) | NameError::TooLong(k) => write!(
                f,
                "{} needs a name of 1 to {} characters",
                k.what(),
                k.max_chars()
            ),
            NameError::BadCharacter(k, c) => write!(
                f,
                "{}'s name cannot hold the control character U+{:04X}",
                k.what(),
                u32::from(*c)
            ),
        }
    }
}

impl std::error::Error for NameError {}

/// True for the characters that reorder displayed text: U+061C, U+200E, U+200F, U+202A–U+202E
/// and U+2066–U+2069 (the explicit directional formatting characters of Unicode Standard
/// Annex #9, "Unicode Bidirectional Algorithm", table 1).
pub fn is_bidi_control(c: char) -> bool {
    matches!(
        c,
        '\u{061C}' | '\u{200E}' | '\u{200F}' | '\u{202A}'..='\u{202E}' | '\u{2066}'..='\u{2069}'
    )
}

/// The first character of `text` that may not appear in a name, if any.
pub fn forbidden_char(text: &str) -> Option<char> {
    text.chars().find(|&c| c.is_control() || is_bidi_control(c))
}

/// Checks a name of `kind`: returns it trimmed, or says what is wrong.
pub fn check(kind: NameKind, raw: &str) -> Result<String, NameError> {
    let name = raw.trim();
    if name.is_empty() {
        return Err(NameError::Empty(kind));
    }
    if name.chars().count() > kind.max_chars() {
        return Err(NameError::TooLong(kind));
    }
    if let Some(c) = forbidden_char(name) {
        return Err(NameError::BadCharacter(kind, c));
    }
    Ok(name.to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn limits_at_and_past() {
        for kind in [NameKind::Goal, NameKind::Team, NameKind::TokenLabel] {
            let max = kind.max_chars();
            let at = "ö".repeat(max);
            assert_eq!(check(kind, &format!("  {at} ")), Ok(at.clone()));
            let past = "ö".repeat(max + 1);
            assert_eq!(check(kind, &past), Err(NameError::TooLong(kind)));
        }
        assert_eq!(
            check(NameKind::Team, " \t "),
            Err(NameError::Empty(NameKind::Team))
        );
    }

    #[test]
    fn control_and_bidi_characters_are_refused() {
        for bad in ["pot\u{202E}gnp.exe", "a\u{2066}b", "tab\there", "nul\0"] {
            assert!(
                matches!(check(NameKind::Goal, bad), Err(NameError::BadCharacter(..))),
                "{bad:?}"
            );
        }
        assert_eq!(
            check(NameKind::Goal, "Topf groß → Matte"),
            Ok("Topf groß → Matte".into())
        );
        assert_eq!(check(NameKind::Goal, "鉢 zone"), Ok("鉢 zone".into()));
    }
}
