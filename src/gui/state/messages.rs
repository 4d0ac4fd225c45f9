//! The message area's lines: every error, warning and notice the app has for the user,
//! kept until dismissed (at most [`MAX_MESSAGES`], the oldest going first).

/// How serious a message is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Level {
    /// Something failed; nothing was lost.
    Error,
    /// Worth knowing before trusting a figure.
    Warning,
    /// Done.
    Info,
}

/// A line shown in the message area until dismissed.
#[derive(Debug, Clone, PartialEq)]
pub struct Message {
    /// Its level.
    pub level: Level,
    /// Its text.
    pub text: String,
}

/// Messages kept at most (older ones go first).
pub const MAX_MESSAGES: usize = 20;

/// The messages not yet dismissed, oldest first.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Messages {
    lines: Vec<Message>,
}

impl Messages {
    /// Adds a message, dropping the oldest beyond [`MAX_MESSAGES`].
    pub fn say(&mut self, level: Level, text: impl Into<String>) {
        self.lines.push(Message {
            level,
            text: text.into(),
        });
        if self.lines.len() > MAX_MESSAGES {
            self.lines.remove(0);
        }
    }

    /// Removes message `i` (oldest first); an index past the end is ignored (the view
    /// may hold one from before a message was dropped).
    pub fn dismiss(&mut self, i: usize) {
        if i < self.lines.len() {
            self.lines.remove(i);
        }
    }

    /// The messages, oldest first.
    pub fn lines(&self) -> &[Message] {
        &self.lines
    }

    /// The most recent error message, if any is shown.
    pub fn last_error(&self) -> Option<&str> {
        self.lines
            .iter()
            .rev()
            .find(|m| m.level == Level::Error)
            .map(|m| m.text.as_str())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_oldest_go_first_and_dismissal_is_by_position() {
        let mut m = Messages::default();
        for i in 0..MAX_MESSAGES + 3 {
            m.say(Level::Info, format!("n{i}"));
        }
        assert_eq!(m.lines().len(), MAX_MESSAGES);
        assert_eq!(m.lines()[0].text, "n3");
        m.dismiss(0);
        assert_eq!(m.lines()[0].text, "n4");
        m.dismiss(999);
        assert_eq!(m.lines().len(), MAX_MESSAGES - 1);
    }

    #[test]
    fn the_last_error_is_the_newest_error_shown() {
        let mut m = Messages::default();
        assert_eq!(m.last_error(), None);
        m.say(Level::Error, "first");
        m.say(Level::Warning, "w");
        m.say(Level::Error, "second");
        m.say(Level::Info, "i");
        assert_eq!(m.last_error(), Some("second"));
        m.dismiss(2);
        assert_eq!(m.last_error(), Some("first"));
    }
}
