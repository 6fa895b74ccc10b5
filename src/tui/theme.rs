//! Colours and emphasis. Only the 16 named ANSI colours are used; with `NO_COLOR` set every style is
//! plain text with bold, reverse, underline or dim for emphasis.

use ratatui::style::{Color, Modifier, Style};

/// The styles of one session.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Theme {
    pub no_color: bool,
}

impl Theme {
    /// Whether the environment asks for no colour (<https://no-color.org>: set and not empty).
    pub fn no_color_from_env() -> bool {
        std::env::var_os("NO_COLOR").is_some_and(|v| !v.is_empty())
    }

    fn pick(self, colour: Style, plain: Style) -> Style {
        if self.no_color { plain } else { colour }
    }

    pub fn normal(self) -> Style {
        Style::default()
    }

    /// The title bar.
    pub fn title(self) -> Style {
        self.pick(
            Style::default().fg(Color::Black).bg(Color::Cyan),
            Style::default().add_modifier(Modifier::REVERSED),
        )
    }

    /// The current view's name in the title bar.
    pub fn title_current(self) -> Style {
        self.pick(
            Style::default()
                .fg(Color::White)
                .bg(Color::Blue)
                .add_modifier(Modifier::BOLD),
            Style::default().add_modifier(Modifier::BOLD),
        )
    }

    pub fn header(self) -> Style {
        self.pick(
            Style::default()
                .fg(Color::Cyan)
                .add_modifier(Modifier::BOLD),
            Style::default().add_modifier(Modifier::BOLD | Modifier::UNDERLINED),
        )
    }

    /// The cursor cell (or row).
    pub fn cursor(self) -> Style {
        self.pick(
            Style::default().fg(Color::Black).bg(Color::Yellow),
            Style::default().add_modifier(Modifier::REVERSED),
        )
    }

    /// A cell being typed.
    pub fn editing(self) -> Style {
        self.pick(
            Style::default()
                .fg(Color::Black)
                .bg(Color::White)
                .add_modifier(Modifier::BOLD),
            Style::default().add_modifier(Modifier::BOLD | Modifier::UNDERLINED),
        )
    }

    pub fn error(self) -> Style {
        self.pick(
            Style::default()
                .fg(Color::LightRed)
                .add_modifier(Modifier::BOLD),
            Style::default().add_modifier(Modifier::BOLD | Modifier::UNDERLINED),
        )
    }

    pub fn warning(self) -> Style {
        self.pick(
            Style::default().fg(Color::Yellow),
            Style::default().add_modifier(Modifier::UNDERLINED),
        )
    }

    pub fn good(self) -> Style {
        self.pick(Style::default().fg(Color::LightGreen), Style::default())
    }

    /// Computed (not typed) values, e.g. a flow from pitot readings.
    pub fn computed(self) -> Style {
        self.pick(
            Style::default()
                .fg(Color::Cyan)
                .add_modifier(Modifier::ITALIC),
            Style::default().add_modifier(Modifier::ITALIC),
        )
    }

    pub fn dim(self) -> Style {
        self.pick(
            Style::default().fg(Color::DarkGray),
            Style::default().add_modifier(Modifier::DIM),
        )
    }

    /// Key names in the status line and help.
    pub fn key(self) -> Style {
        self.pick(
            Style::default()
                .fg(Color::LightCyan)
                .add_modifier(Modifier::BOLD),
            Style::default().add_modifier(Modifier::BOLD),
        )
    }

    /// A colour for drawing (canvas, chart), or none at all without colour.
    pub fn ink(self, colour: Color) -> Color {
        if self.no_color { Color::Reset } else { colour }
    }

    /// A style with only a foreground colour, or plain without colour.
    pub fn fg(self, colour: Color) -> Style {
        self.pick(Style::default().fg(colour), Style::default())
    }
}

/// Colours for roughness groups on the map, in group order (cycled).
pub const GROUP_COLOURS: [Color; 8] = [
    Color::LightBlue,
    Color::LightMagenta,
    Color::LightGreen,
    Color::Yellow,
    Color::LightCyan,
    Color::LightRed,
    Color::Blue,
    Color::Magenta,
];
