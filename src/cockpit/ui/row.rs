//! Fitting a line of labelled values into whatever width there is.
//!
//! Each segment has a priority; when the line is too long the least important segments go
//! first, and the rest keep their order. This is how panels shrink at 80 columns without
//! ever dropping the state word or the position.

use ratatui::style::Style;
use ratatui::text::{Line, Span};

/// A line under construction.
#[derive(Debug, Default)]
pub struct Row {
    segs: Vec<(u8, Vec<Span<'static>>)>,
}

impl Row {
    /// An empty row.
    pub fn new() -> Self {
        Self::default()
    }

    /// Adds a segment; priority 0 is never dropped, larger numbers drop first.
    pub fn push(&mut self, priority: u8, spans: Vec<Span<'static>>) -> &mut Self {
        self.segs.push((priority, spans));
        self
    }

    /// Adds a one-span segment.
    pub fn text(&mut self, priority: u8, text: impl Into<String>, style: Style) -> &mut Self {
        self.push(priority, vec![Span::styled(text.into(), style)])
    }

    fn width(spans: &[Span<'_>]) -> usize {
        spans.iter().map(Span::width).sum()
    }

    /// The line that fits in `width` columns (segments separated by `gap` spaces).
    pub fn fit(mut self, width: usize, gap: usize) -> Line<'static> {
        loop {
            let total: usize = self.segs.iter().map(|(_, s)| Self::width(s)).sum::<usize>()
                + gap * self.segs.len().saturating_sub(1);
            if total <= width {
                break;
            }
            // The last of the least important segments goes first.
            let worst = self
                .segs
                .iter()
                .enumerate()
                .filter(|(_, (p, _))| *p > 0)
                .max_by_key(|(i, (p, _))| (*p, *i))
                .map(|(i, _)| i);
            match worst {
                Some(i) => {
                    self.segs.remove(i);
                }
                None => break,
            }
        }
        let mut spans = Vec::new();
        for (i, (_, s)) in self.segs.into_iter().enumerate() {
            if i > 0 && gap > 0 {
                spans.push(Span::raw(" ".repeat(gap)));
            }
            spans.extend(s);
        }
        Line::from(spans)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn plain(l: &Line<'_>) -> String {
        l.spans.iter().map(|s| s.content.as_ref()).collect()
    }

    #[test]
    fn least_important_goes_first() {
        let mut r = Row::new();
        r.text(0, "state", Style::new()).text(2, "extra", Style::new()).text(
            1,
            "pos",
            Style::new(),
        );
        assert_eq!(plain(&r.fit(20, 1)), "state extra pos");
        let mut r = Row::new();
        r.text(0, "state", Style::new()).text(2, "extra", Style::new()).text(
            1,
            "pos",
            Style::new(),
        );
        assert_eq!(plain(&r.fit(10, 1)), "state pos");
        let mut r = Row::new();
        r.text(0, "state", Style::new()).text(2, "extra", Style::new()).text(
            1,
            "pos",
            Style::new(),
        );
        assert_eq!(plain(&r.fit(3, 1)), "state");
    }
}
