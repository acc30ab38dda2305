//! Rendering snapshots: the cockpit drawn into ratatui's TestBackend at 80×24 (the smallest
//! supported terminal), 60×18 (a small console) and 160×48, from hand-made snapshots (no
//! engine).
//!
//! The snapshots are committed under tests/snapshots/; with CI=true a missing one fails.
//! To review a change: `INSTA_UPDATE=always cargo test --test cockpit_render`, then read the
//! diff of the .snap files.
mod cockpit_support;

use cockpit_support as s;
use ratatui::style::Color;
use servotty::cockpit::action::Action;
use servotty::cockpit::theme::Glyphs;
use servotty::cockpit::{App, Theme};
use servotty::config::ConfigSource;

const SIZES: [(u16, u16); 3] = [(80, 24), (60, 18), (160, 48)];

fn check(name: &str, app: &App) {
    for (w, h) in SIZES {
        let t = s::draw(app, w, h);
        insta::assert_snapshot!(format!("{name}_{w}x{h}"), t.backend());
    }
}

#[test]
fn overview_three_axes() {
    check("overview", &s::normal());
}

#[test]
fn overview_tripped_axis() {
    let app = s::tripped();
    check("tripped", &app);
    // The trip is on screen as words, not only as colour.
    let text = s::screen(&app, 80, 24);
    assert!(text.contains("tripped"), "{text}");
    assert!(text.contains("TRIP: following error"), "{text}");
}

#[test]
fn overview_homing_axis() {
    let app = s::homing();
    check("homing", &app);
    assert!(s::screen(&app, 80, 24).contains("homing"));
}

#[test]
fn overview_stop_all_latched() {
    let app = s::stop_latched();
    check("stop_latched", &app);
    let text = s::screen(&app, 80, 24);
    assert!(text.contains("STOP-ALL LATCHED"), "{text}");
    assert!(text.contains("stopped"), "{text}");
}

#[test]
fn help_overlay() {
    let mut app = s::normal();
    app.log_file = Ok("/tmp/servotty-test/cockpit.log".into());
    app.apply(s::at(200), Action::Help);
    check("help", &app);
}

/// Where the keys do not fit, the help scrolls; the cautions stay whole at every position.
#[test]
fn help_scrolled_to_its_end() {
    let mut app = s::normal();
    app.log_file = Ok("/tmp/servotty-test/cockpit.log".into());
    app.apply(s::at(200), Action::Help);
    for _ in 0..5 {
        app.apply(s::at(200), Action::HelpScroll(10));
    }
    check("help_end", &app);
    for (w, h) in SIZES {
        let text = s::screen(&app, w, h);
        let flat = text.replace(['│', '"'], " ");
        let flat = flat.split_whitespace().collect::<Vec<_>>().join(" ");
        assert!(flat.contains("wire a hardware emergency stop"), "{w}x{h}: {text}");
        assert!(flat.contains("not a safety"), "{w}x{h}: {text}");
    }
}

#[test]
fn detail_screen() {
    let mut app = s::normal();
    app.apply(s::at(200), Action::OpenDetail);
    check("detail", &app);
}

#[test]
fn detail_screen_with_a_gain_prompt() {
    let mut app = s::normal();
    for a in [Action::OpenDetail, Action::ParamNext, Action::EditParam] {
        app.apply(s::at(200), a);
    }
    for a in [Action::EntryBackspace, Action::EntryBackspace] {
        app.apply(s::at(200), a);
    }
    for c in "-3".chars() {
        app.apply(s::at(200), Action::EntryChar(c));
    }
    app.apply(s::at(200), Action::EntrySubmit);
    let t = s::draw(&app, 80, 24);
    insta::assert_snapshot!("detail_gain_refused_80x24", t.backend());
}

#[test]
fn quit_question_names_the_motors_that_are_on() {
    let mut app = s::normal();
    app.apply(s::at(200), Action::Quit);
    for (w, h) in [(80, 24), (60, 18)] {
        let t = s::draw(&app, w, h);
        insta::assert_snapshot!(format!("confirm_quit_{w}x{h}"), t.backend());
        let text = s::screen(&app, w, h);
        assert!(text.contains("Quitting turns every motor off"), "{w}x{h}: cut\n{text}");
    }
}

#[test]
fn the_status_line_keeps_jog_unsaved_gains_and_the_trip_band() {
    let mut app = s::tripped();
    app.config.axes[0].controller.kp += 1.0;
    for (w, h) in [(80, 24), (60, 18)] {
        let text = s::screen(&app, w, h);
        let status = text.lines().rev().nth(1).expect("status line");
        assert!(status.contains("TRIP following error"), "{w}x{h}: {status}");
        assert!(status.trim_matches('"').chars().count() <= usize::from(w), "{w}x{h}: {status}");
        assert!(status.contains("3.36") && status.contains("3.12 mm"), "{w}x{h}: {status}");
        assert!(status.contains("unsaved") && status.contains("jog"), "{w}x{h}: {status}");
        let footer = text.lines().last().expect("footer");
        assert!(footer.contains("clear trip"), "{w}x{h}: the tripped axis offers c: {footer}");
    }
}

#[test]
fn an_offline_axis_says_why_in_its_row_and_once_in_the_log() {
    let mut app = s::normal();
    let mut snaps: Vec<_> = app.axes.iter().map(|v| v.snap.clone()).collect();
    snaps[2].state = servotty::engine::AxisState::Offline;
    snaps[2].link_error = Some("/dev/ttyACM0: no such device (is the board plugged in?)".into());
    for k in 0..5 {
        app.observe(s::at(201 + k), &snaps, false);
    }
    let text = s::screen(&app, 80, 24);
    assert!(text.contains("link down: /dev/ttyACM0: no such"), "{text}");
    let logged = app.log.entries().iter().filter(|e| e.text.contains("no such device")).count();
    assert_eq!(logged, 1, "repeats are folded into one entry");
}

#[test]
fn eight_axes_shrink_but_keep_their_numbers() {
    let cfg = s::eight_axes();
    let mut app = App::new(cfg.clone(), ConfigSource::BuiltInDemo, Theme::default());
    for k in 0..200 {
        app.observe(s::at(k), &s::eight_frame(&cfg, k), false);
    }
    let t = s::draw(&app, 80, 24);
    insta::assert_snapshot!("eight_axes_80x24", t.backend());
    let text = t.backend().to_string();
    for a in &cfg.axes {
        assert!(text.contains(&format!("{}  moving", a.name)), "{} missing:\n{text}", a.name);
    }
    assert!(text.contains("stop-all (not safety-rated)"));
}

#[test]
fn every_mode_shows_the_stop_all_key() {
    let mut app = s::normal();
    let steps = [
        vec![],
        vec![Action::OpenDetail],
        vec![Action::Back, Action::ToggleLog],
        vec![Action::Help],
        vec![Action::CloseOverlay, Action::GoTo],
        vec![Action::EntryCancel, Action::Quit],
    ];
    for step in steps {
        for a in step {
            app.apply(s::at(200), a);
        }
        for (w, h) in SIZES {
            let text = s::screen(&app, w, h);
            assert!(
                text.contains("Space  stop-all (not safety-rated)"),
                "{:?}:\n{text}",
                app.mode()
            );
        }
    }
}

#[test]
fn no_color_means_no_colour_at_all() {
    let mut app = s::tripped();
    app.theme = Theme::monochrome();
    app.apply(s::at(200), Action::StopAll);
    for screen in [None, Some(Action::OpenDetail), Some(Action::Help)] {
        if let Some(a) = screen {
            app.apply(s::at(200), a);
        }
        let t = s::draw(&app, 160, 48);
        let buf = t.backend().buffer();
        for cell in buf.content() {
            assert_eq!(cell.fg, Color::Reset, "colour at {:?}", cell.symbol());
            assert_eq!(cell.bg, Color::Reset, "colour at {:?}", cell.symbol());
        }
    }
}

#[test]
fn sixteen_colours_only() {
    // A Linux console has the 16 ANSI colours: no indexed or RGB colour may appear.
    let app = s::tripped();
    let t = s::draw(&app, 160, 48);
    for cell in t.backend().buffer().content() {
        for c in [cell.fg, cell.bg] {
            assert!(!matches!(c, Color::Rgb(..) | Color::Indexed(_)), "{c:?}");
        }
    }
}

#[test]
fn console_glyphs_avoid_braille_and_eighth_blocks() {
    let mut app = s::normal();
    app.theme = Theme { color: true, glyphs: Glyphs::Console };
    app.apply(s::at(200), Action::OpenDetail);
    let mut text = s::screen(&app, 160, 48);
    app.apply(s::at(200), Action::Back);
    text.push_str(&s::screen(&app, 160, 48));
    for c in text.chars() {
        let braille = ('\u{2800}'..='\u{28FF}').contains(&c);
        let eighths = "▁▂▃▅▆▇".contains(c);
        assert!(!braille && !eighths && c != '▶', "{c:?} in console mode");
    }
}

#[test]
fn tiny_terminal_still_names_the_stop_key() {
    let text = s::screen(&s::normal(), 30, 4);
    assert!(text.contains("Space"), "{text}");
}

#[test]
fn log_screen_wraps_long_entries() {
    let mut app = s::tripped();
    app.apply(s::at(200), Action::ToggleLog);
    let t = s::draw(&app, 80, 24);
    insta::assert_snapshot!("log_screen_80x24", t.backend());
    assert!(t.backend().to_string().contains("a slipping belt"));
}
