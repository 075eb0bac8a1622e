//! The encode report and the shell's `--format svg`: well-formed SVG, one mark per
//! level drawn, every interval inside its axis, level names shown as text, the same
//! bytes for the same inputs, degenerate data, size at 30,000 levels, and a real
//! browser rendering the page.

use std::path::{Path, PathBuf};
use std::process::Command;

use posterity::bundle::Bundle;
use posterity::layout::AnyPosterior;
use posterity::report::levels::{interval_selection, panels_of, scatter_selection, Panel};
use posterity::report::{EXTREMES, MOST_DATA, SCATTER_LIMIT};

/// The interval plot's drawing area in pixels (plots.rs: 10 px margin, 200 px of
/// level labels, 760 px wide).
const PLOT_LEFT: f64 = 210.0;
const PLOT_RIGHT: f64 = 750.0;
const LEVEL_COLOUR: &str = "#0072B2";

fn posterity(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_posterity"))
        .args(args)
        .output()
        .unwrap()
}

/// `encode --report` of `csv` on `columns`; the report's text and the bundle.
fn encode_report(
    dir: &Path,
    csv: &str,
    target: &str,
    columns: &str,
    extra: &[&str],
) -> (String, Bundle) {
    let train = dir.join("train.csv");
    std::fs::write(&train, csv).unwrap();
    let out = dir.join("out");
    let mut args = vec![
        "encode",
        "--train",
        train.to_str().unwrap(),
        "--target",
        target,
        "--columns",
        columns,
        "--out",
        out.to_str().unwrap(),
        "--replace",
        "--report",
    ];
    args.extend_from_slice(extra);
    let o = posterity(&args);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let report = std::fs::read_to_string(out.join("report.html")).unwrap();
    let bundle =
        Bundle::from_json(&std::fs::read_to_string(out.join("bundle.json")).unwrap()).unwrap();
    (report, bundle)
}

/// Every `<svg>…</svg>` of a page (nested documents stay inside their parent).
fn svgs(page: &str) -> Vec<&str> {
    let mut out = Vec::new();
    let mut rest = page;
    while let Some(start) = rest.find("<svg") {
        let end = start + rest[start..].find("</svg>").unwrap() + "</svg>".len();
        out.push(&rest[start..end]);
        rest = &rest[end..];
    }
    out
}

/// Parse an SVG as XML (the test fails on any malformed document) and check that
/// no number in it is NaN or infinite.
fn parse(svg: &str) -> roxmltree::Document<'_> {
    let doc = roxmltree::Document::parse(svg).unwrap_or_else(|e| panic!("not XML: {e}"));
    for node in doc.descendants().filter(|n| n.is_element()) {
        for a in node.attributes() {
            assert!(
                !a.value().contains("NaN") && !a.value().contains("inf"),
                "non-finite attribute {}={}",
                a.name(),
                a.value()
            );
        }
    }
    doc
}

/// Level marks: the filled circles drawn in the levels' colour.
fn level_marks<'a>(doc: &'a roxmltree::Document<'a>) -> Vec<roxmltree::Node<'a, 'a>> {
    doc.descendants()
        .filter(|n| n.has_tag_name("circle") && n.attribute("fill") == Some(LEVEL_COLOUR))
        .collect()
}

fn panels(bundle: &Bundle, column: &str) -> Vec<Panel> {
    let c = &bundle.columns[column];
    let levels: Vec<(&str, &AnyPosterior)> =
        c.levels.iter().map(|(l, p)| (l.as_str(), p)).collect();
    panels_of(column, &bundle.target, &c.prior, &levels).unwrap()
}

/// 60 clinics (sizes 1 to 60 rows each, rates from 0 to 1 across clinics), and
/// breeds with names that are markup; target `missed` (0/1).
fn clinics_csv() -> String {
    let mut s = String::from("clinic,breed,missed\n");
    let breeds = ["<script>alert(1)</script>", "a&b \"quoted\"", "plain"];
    for c in 0..60u32 {
        for r in 0..=c {
            let missed = u32::from((r * 7 + c) % 60 < c);
            let breed = breeds[((r + c) % 3) as usize];
            let quoted = format!("\"{}\"", breed.replace('"', "\"\""));
            s.push_str(&format!("clinic_{c:02},{quoted},{missed}\n"));
        }
    }
    s
}

#[test]
fn every_picture_is_xml_with_one_mark_per_level_inside_its_axis() {
    let dir = scratch!("marks");
    let (report, bundle) = encode_report(&dir, &clinics_csv(), "missed", "clinic,breed", &[]);
    let pictures = svgs(&report);
    // Three pictures per column.
    assert_eq!(pictures.len(), 6, "{}", pictures.len());
    for (i, column) in ["clinic", "breed"].iter().enumerate() {
        let panel = &panels(&bundle, column)[0];
        let interval = parse(pictures[3 * i]);
        let chosen = interval_selection(&panel.levels, MOST_DATA, EXTREMES);
        assert_eq!(
            level_marks(&interval).len(),
            chosen.len(),
            "{column}: interval marks"
        );
        // Every interval's ends and every mean inside the drawing area.
        for node in interval.descendants() {
            let xs: Vec<f64> = match node.tag_name().name() {
                "circle" if node.attribute("fill") == Some(LEVEL_COLOUR) => {
                    vec![node.attribute("cx").unwrap().parse().unwrap()]
                }
                "polyline" if node.attribute("stroke") == Some(LEVEL_COLOUR) => node
                    .attribute("points")
                    .unwrap()
                    .split_whitespace()
                    .map(|p| p.split(',').next().unwrap().parse().unwrap())
                    .collect(),
                _ => continue,
            };
            for x in xs {
                assert!(
                    (PLOT_LEFT..=PLOT_RIGHT).contains(&x),
                    "{column}: x = {x} outside the axis"
                );
            }
        }
        let shrinkage = parse(pictures[3 * i + 1]);
        let scatter = scatter_selection(&panel.levels, SCATTER_LIMIT);
        let with_raw = scatter
            .iter()
            .filter(|&&k| panel.levels[k].raw.is_some())
            .count();
        // The shrinkage marks are translucent: their fill carries an opacity.
        let marks = shrinkage
            .descendants()
            .filter(|n| n.has_tag_name("circle") && n.attribute("fill") == Some(LEVEL_COLOUR))
            .count();
        assert_eq!(marks, with_raw, "{column}: shrinkage marks");
        parse(pictures[3 * i + 2]);
    }
    // Level names are text, never markup.
    assert!(!report.contains("<script"), "a level name became markup");
    assert!(report.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
    assert!(report.contains("a&amp;b &quot;quoted&quot;") || report.contains("a&amp;b \"quoted\""));
    // The cautions travel with any report that might score people.
    assert!(report.contains("proxy discrimination"));
}

#[test]
fn the_same_inputs_give_the_same_bytes() {
    let a = encode_report(
        &scratch!("same-a"),
        &clinics_csv(),
        "missed",
        "clinic,breed",
        &[],
    )
    .0;
    let b = encode_report(
        &scratch!("same-b"),
        &clinics_csv(),
        "missed",
        "clinic,breed",
        &[],
    )
    .0;
    assert!(a == b, "two runs of one encode drew different reports");
}

#[test]
fn degenerate_data_still_draws() {
    let cases: Vec<(&str, String, Vec<&str>)> = vec![
        ("one level", "k,y\nonly,1\nonly,0\nonly,1\n".into(), vec![]),
        (
            "all-equal levels",
            (0..40)
                .map(|i| format!("l{},{}\n", i % 4, (i / 4) % 2))
                .collect::<String>(),
            vec![],
        ),
        (
            "all NULL",
            "k,y\n,1\n,0\n,1\n".into(),
            vec!["--prior", "jeffreys"],
        ),
        (
            "0 % and 100 % raw rates",
            "k,y\nnone,0\nnone,0\nnone,0\nall,1\nall,1\nall,1\nhalf,0\nhalf,1\n".into(),
            vec![],
        ),
    ];
    for (name, mut csv, extra) in cases {
        if !csv.starts_with("k,y") {
            csv.insert_str(0, "k,y\n");
        }
        let dir = scratch!(&name.replace([' ', '%'], "-"));
        let (report, bundle) = encode_report(&dir, &csv, "y", "k", &extra);
        let levels = bundle.columns["k"].levels.len();
        let pictures = svgs(&report);
        if levels == 0 {
            assert!(pictures.is_empty(), "{name}");
            assert!(report.contains("no levels with data to draw"), "{name}");
        } else {
            assert_eq!(pictures.len(), 3, "{name}");
            let interval = parse(pictures[0]);
            assert_eq!(level_marks(&interval).len(), levels, "{name}");
            for svg in &pictures[1..] {
                parse(svg);
            }
        }
    }
}

#[test]
fn every_family_draws_on_its_own_scale() {
    let mut numeric = String::from("clinic,amount,visits,minutes,outcome\n");
    for i in 0..400u32 {
        let clinic = i % 25;
        let outcome = ["attended", "missed", "cancelled"][(i % 7 % 3) as usize];
        numeric.push_str(&format!(
            "c{clinic:02},{},{},{},{outcome}\n",
            50.25 + f64::from(clinic) * 3.0 + f64::from(i % 11),
            i % 4,
            10 + i % 5
        ));
    }
    let dir = scratch!("families");
    let cases: [(&str, &[&str], &str, usize); 3] = [
        ("amount", &[], "level mean (in units of the target)", 1),
        (
            "visits",
            &["--exposure", "minutes"],
            "rate per unit of exposure",
            1,
        ),
        ("outcome", &[], "probability of class", 3),
    ];
    for (target, extra, axis, panels_per_key) in cases {
        let (report, _) = encode_report(&dir, &numeric, target, "clinic", extra);
        assert!(report.contains(axis), "{target}: axis '{axis}'");
        assert!(
            report.contains(&format!("{target}: ")),
            "{target}: axis names the target"
        );
        let pictures = svgs(&report);
        assert_eq!(pictures.len(), 3 * panels_per_key, "{target}");
        for svg in pictures {
            parse(svg);
        }
    }
}

#[test]
fn thirty_thousand_levels_stay_small() {
    // 30,000 levels of one to eight rows each (Zipf-like sizes are not needed: the
    // drawing choice depends on the number of levels).
    let mut csv = String::from("postcode,y\n");
    for i in 0..30_000u32 {
        for r in 0..(1 + i % 8) {
            csv.push_str(&format!("P{i:05},{}\n", u32::from((i + r) % 9 == 0)));
        }
    }
    let dir = scratch!("large");
    let (report, _) = encode_report(&dir, &csv, "y", "postcode", &["--prior", "jeffreys"]);
    assert!(report.len() < 5_000_000, "report is {} bytes", report.len());
    let pictures = svgs(&report);
    let marks = level_marks(&parse(pictures[1])).len();
    assert!(marks <= SCATTER_LIMIT, "{marks} shrinkage marks");
}

#[test]
fn format_svg_draws_any_lookup() {
    let dir = scratch!("format-svg");
    let csv = dir.join("visits.csv");
    std::fs::write(&csv, clinics_csv()).unwrap();
    let table = format!("v={}", csv.display());
    let svg_path = dir.join("clinics.svg");
    let o = posterity(&[
        "-t",
        &table,
        "-c",
        "SELECT clinic, beta_posterior(missed, beta_prior(1, 1)) AS p FROM v GROUP BY clinic",
        "-o",
        svg_path.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let svg = std::fs::read_to_string(&svg_path).unwrap();
    let doc = parse(&svg);
    // The same choice of rows as the report's, from the clinics' own counts.
    let mut counts = std::collections::BTreeMap::<String, (f64, f64)>::new();
    for line in clinics_csv().lines().skip(1) {
        let clinic = line.split(',').next().unwrap().to_string();
        let missed: f64 = line.rsplit(',').next().unwrap().parse().unwrap();
        let e = counts.entry(clinic).or_default();
        *e = (e.0 + missed, e.1 + 1.0);
    }
    let posteriors: Vec<(String, AnyPosterior)> = counts
        .into_iter()
        .map(|(c, (s, n))| {
            let p = posterity::family::BetaPosterior::from_parts(1.0, 1.0, s, n).unwrap();
            (c, AnyPosterior::Beta(p))
        })
        .collect();
    let pairs: Vec<(&str, &AnyPosterior)> =
        posteriors.iter().map(|(c, p)| (c.as_str(), p)).collect();
    let panel = &panels_of("p", "p", &pairs[0].1.scale(0.0).unwrap(), &pairs).unwrap()[0];
    let chosen = interval_selection(&panel.levels, MOST_DATA, EXTREMES);
    assert_eq!(level_marks(&doc).len(), chosen.len(), "marks");
    let labels: Vec<&str> = doc
        .descendants()
        .filter(|n| n.has_tag_name("text"))
        .filter_map(|n| n.text())
        .map(str::trim)
        .collect();
    for &i in &chosen {
        assert!(
            labels.contains(&panel.levels[i].label.as_str()),
            "{} not labelled",
            panel.levels[i].label
        );
    }
    // A Dirichlet lookup: one panel per class, stacked in one document.
    let o = posterity(&[
        "-t",
        &table,
        "--format",
        "svg",
        "-c",
        "SELECT breed, dirichlet_posterior(CAST(missed AS VARCHAR), dirichlet_prior(['0', '1'], 1)) AS p FROM v GROUP BY breed",
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let svg = String::from_utf8(o.stdout).unwrap();
    let doc = parse(&svg);
    assert_eq!(
        level_marks(&doc).len(),
        2 * 3,
        "two classes of three breeds"
    );
    assert!(!svg.contains("<script"));
    // Results it cannot draw are refused in the option's words.
    for (sql, words) in [
        ("SELECT clinic FROM v", "no posterior column"),
        (
            "SELECT beta_posterior(missed) AS p FROM v",
            "needs a label column",
        ),
        (
            "SELECT clinic, beta_posterior(missed) AS p FROM v WHERE false GROUP BY clinic",
            "no rows",
        ),
    ] {
        let o = posterity(&["-t", &table, "--format", "svg", "-c", sql]);
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(
            !o.status.success() && err.contains("--format svg") && err.contains(words),
            "{sql}: {err}"
        );
    }
}

/// Debian's Chromium, which .ci/run installs.
fn chromium() -> PathBuf {
    let path = PathBuf::from("/usr/bin/chromium");
    assert!(
        path.exists(),
        "the browser test needs Debian's Chromium: apt-get install -y chromium (.ci/run does)"
    );
    path
}

/// A real browser renders the report headless to a PNG of the window's size that is
/// not blank (headless flags as on this machine kind: no network, no GPU).
#[test]
fn a_browser_renders_the_report() {
    let dir = scratch!("browser");
    encode_report(&dir, &clinics_csv(), "missed", "clinic,breed", &[]);
    let page = dir.join("out").join("report.html");
    let png = dir.join("report.png");
    let o = Command::new(chromium())
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--hide-scrollbars",
            "--window-size=900,1600",
        ])
        .arg(format!("--user-data-dir={}", dir.join("profile").display()))
        .arg(format!("--screenshot={}", png.display()))
        .arg(format!("file://{}", page.display()))
        .output()
        .unwrap();
    assert!(
        png.exists(),
        "no screenshot: {}",
        String::from_utf8_lossy(&o.stderr)
    );
    let decoder = png::Decoder::new(std::io::BufReader::new(std::fs::File::open(&png).unwrap()));
    let mut reader = decoder.read_info().unwrap();
    let mut pixels = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut pixels).unwrap();
    assert_eq!((info.width, info.height), (900, 1600));
    let channels = info.color_type.samples();
    let pixels = &pixels[..info.buffer_size()];
    let dark = pixels
        .chunks(channels)
        .filter(|p| p.iter().take(3).any(|&c| c < 128))
        .count();
    let share = dark as f64 / (info.width * info.height) as f64;
    // Text, axes and marks: a blank or failed page has none.
    assert!(share > 0.005, "only {:.4} of the page is drawn", share);
    // The level colour appears (the marks were drawn, not only text).
    let blue = pixels
        .chunks(channels)
        .filter(|p| p[0] < 40 && (0x60..0x80).contains(&p[1]) && p[2] > 0x90)
        .count();
    assert!(blue > 200, "{blue} pixels in the levels' colour");
}
