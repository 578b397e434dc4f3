//! The view's state and its key bindings, apart from any terminal: the
//! event loop in [`super::term`] feeds keys in and draws what this holds.

use crossterm::event::{KeyCode, KeyEvent, KeyModifiers};

use super::filter::Filter;
use super::source::Source;

/// Records a filter visits between two redraws: a filter over a long trace
/// fills in while the screen stays live.
const FILTER_BUDGET: usize = 100_000;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Prompt {
    Filter,
    Search,
}

/// What a key asks of the loop.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Action {
    None,
    Quit,
}

#[derive(Debug, Default)]
pub struct App {
    /// The selected row.
    pub selected: usize,
    /// The first row on screen (kept by the list's drawing).
    pub top: usize,
    /// Rows kept by the filter, as record positions; `None`: every record.
    pub rows: Option<Vec<usize>>,
    pub filter: Option<Filter>,
    /// Records the filter has visited so far.
    filter_pos: usize,
    pub search: Option<Filter>,
    /// Keep the newest record selected as records arrive.
    pub follow: bool,
    pub hide_detail: bool,
    pub legend: bool,
    pub prompt: Option<(Prompt, String)>,
    /// A one-line note: a bad filter, a search that found nothing.
    pub message: Option<String>,
    /// The run was asked to stop (the first quit of a live run).
    pub stopping: bool,
}

impl App {
    pub fn new(follow: bool) -> App {
        App { follow, ..App::default() }
    }

    /// Rows in the list.
    pub fn row_count(&self, src: &dyn Source) -> usize {
        self.rows.as_ref().map_or(src.len(), Vec::len)
    }

    /// The record position of a row.
    pub fn record_of(&self, row: usize) -> Option<usize> {
        match &self.rows {
            Some(r) => r.get(row).copied(),
            None => Some(row),
        }
    }

    /// Whether the filter is still visiting records.
    pub fn filtering(&self, src: &dyn Source) -> bool {
        self.filter.is_some() && self.filter_pos < src.len()
    }

    /// Takes in new records and moves the filter on; whether the screen changed.
    pub fn tick(&mut self, src: &mut dyn Source) -> bool {
        let grew = src.refresh();
        let mut changed = grew;
        if let Some(f) = self.filter.clone() {
            let end = src.len().min(self.filter_pos + FILTER_BUDGET);
            let rows = self.rows.get_or_insert_with(Vec::new);
            for i in self.filter_pos..end {
                if src.record(i).is_some_and(|r| f.matches(&r)) {
                    rows.push(i);
                }
            }
            changed |= end != self.filter_pos;
            self.filter_pos = end;
        }
        if self.follow {
            self.selected = self.row_count(src).saturating_sub(1);
        }
        changed
    }

    pub fn set_filter(&mut self, f: Option<Filter>) {
        let keep = self.record_of(self.selected);
        self.filter = f.filter(|f| !f.is_empty());
        self.filter_pos = 0;
        self.rows = self.filter.as_ref().map(|_| Vec::new());
        self.selected = 0;
        self.top = 0;
        // Once the filter has visited the record selected before, the
        // loop's first ticks find it; until then the list starts at the top.
        let _ = keep;
    }

    fn select(&mut self, row: usize, src: &dyn Source) {
        let n = self.row_count(src);
        self.selected = row.min(n.saturating_sub(1));
        self.follow = false;
    }

    /// The next (or previous) row, from the selected one, whose record
    /// passes `hit`.
    fn find(
        &self,
        src: &mut dyn Source,
        forward: bool,
        mut hit: impl FnMut(&mut dyn Source, usize) -> bool,
    ) -> Option<usize> {
        let n = self.row_count(src);
        let rows: Box<dyn Iterator<Item = usize>> =
            if forward { Box::new(self.selected + 1..n) } else { Box::new((0..self.selected.min(n)).rev()) };
        for row in rows {
            if let Some(i) = self.record_of(row)
                && hit(src, i)
            {
                return Some(row);
            }
        }
        None
    }

    fn jump_failure(&mut self, src: &mut dyn Source, forward: bool) {
        match self.find(src, forward, |s, i| s.flags(i).failed()) {
            Some(r) => self.select(r, src),
            None => self.message = Some(format!("no NACK or error {}", if forward { "below" } else { "above" })),
        }
    }

    fn jump_search(&mut self, src: &mut dyn Source, forward: bool) {
        let Some(f) = self.search.clone() else {
            self.message = Some("no search yet: press / to search".into());
            return;
        };
        match self.find(src, forward, |s, i| s.record(i).is_some_and(|r| f.matches(&r))) {
            Some(r) => self.select(r, src),
            None => self.message = Some(format!("`{}` not found {}", f.text, if forward { "below" } else { "above" })),
        }
    }

    /// Handles one key; `page` is the list's height in rows.
    pub fn key(&mut self, k: KeyEvent, src: &mut dyn Source, page: usize) -> Action {
        if k.modifiers.contains(KeyModifiers::CONTROL) && k.code == KeyCode::Char('c') {
            return Action::Quit;
        }
        if let Some((kind, mut text)) = self.prompt.take() {
            match k.code {
                KeyCode::Enter => match Filter::parse(&text) {
                    Ok(f) => match kind {
                        Prompt::Filter => self.set_filter(Some(f)),
                        Prompt::Search => {
                            self.search = Some(f).filter(|f| !f.is_empty());
                            self.jump_search(src, true);
                        }
                    },
                    Err(e) => self.message = Some(e.to_string()),
                },
                KeyCode::Esc => {}
                KeyCode::Backspace => {
                    text.pop();
                    self.prompt = Some((kind, text));
                }
                KeyCode::Char(c) if !c.is_control() && text.len() < 200 => {
                    text.push(c);
                    self.prompt = Some((kind, text));
                }
                _ => self.prompt = Some((kind, text)),
            }
            return Action::None;
        }
        self.message = None;
        if self.legend {
            // Any key closes the legend; q still quits.
            self.legend = false;
            if k.code != KeyCode::Char('q') {
                return Action::None;
            }
        }
        let page = page.max(1);
        match k.code {
            KeyCode::Char('q') => return Action::Quit,
            KeyCode::Esc => self.set_filter(None),
            KeyCode::Char('?') => self.legend = true,
            KeyCode::Char(' ') => {
                self.follow = !self.follow;
                if self.follow {
                    self.selected = self.row_count(src).saturating_sub(1);
                }
            }
            KeyCode::Down | KeyCode::Char('j') => self.select(self.selected + 1, src),
            KeyCode::Up | KeyCode::Char('k') => self.select(self.selected.saturating_sub(1), src),
            KeyCode::PageDown => self.select(self.selected + page, src),
            KeyCode::PageUp => self.select(self.selected.saturating_sub(page), src),
            KeyCode::Home | KeyCode::Char('g') => self.select(0, src),
            KeyCode::End | KeyCode::Char('G') => self.select(usize::MAX, src),
            KeyCode::Char('n') => self.jump_failure(src, true),
            KeyCode::Char('N') => self.jump_failure(src, false),
            KeyCode::Char('f') => {
                self.prompt = Some((Prompt::Filter, self.filter.as_ref().map(|f| f.text.clone()).unwrap_or_default()))
            }
            KeyCode::Char('/') => self.prompt = Some((Prompt::Search, String::new())),
            KeyCode::Char('>') => self.jump_search(src, true),
            KeyCode::Char('<') => self.jump_search(src, false),
            KeyCode::Char('d') => self.hide_detail = !self.hide_detail,
            _ => {}
        }
        Action::None
    }
}
