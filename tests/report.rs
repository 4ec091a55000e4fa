//! `emsplan report` on every shipped problem: well-formed, with the sections a reviewer
//! looks for, figures that render, and Markdown whose figures exist.

use std::path::{Path, PathBuf};
use std::process::Command;

fn problems() -> Vec<PathBuf> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("problems");
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|x| x == "toml"))
        // The report handles balanced layouts; one with cells removed is refused (see
        // tests/unbalanced_cli.rs).
        .filter(|p| emsplan::layout::Layout::from_file(p).is_ok_and(|(l, _, _)| l.is_balanced()))
        .collect();
    v.sort();
    assert!(!v.is_empty());
    v
}

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("emsplan-report-{}-{name}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn report(problem: &Path, extra: &[&str]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_emsplan"))
        .arg("report")
        .arg(problem)
        .args(extra)
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// The HTML is well-formed (every tag closed: it parses as XML), holds the sections a
/// reviewer asks for, and every figure is an SVG with a positive size.
#[test]
fn html_report_for_every_problem() {
    for p in problems() {
        let (code, html, err) = report(&p, &[]);
        assert_eq!(code, 0, "{}: {err}", p.display());
        let opts = roxmltree::ParsingOptions {
            allow_dtd: true,
            ..Default::default()
        };
        let doc = roxmltree::Document::parse_with_options(&html, opts)
            .unwrap_or_else(|e| panic!("{}: the HTML is not well-formed: {e}", p.display()));
        let headings: Vec<String> = doc
            .descendants()
            .filter(|n| n.has_tag_name("h2"))
            .map(|n| n.text().unwrap_or("").to_string())
            .collect();
        for want in [
            "The layout",
            "Expected mean squares",
            "The tests that matter",
            "Planning values and reproduction",
        ] {
            assert!(
                headings.iter().any(|h| h == want),
                "{}: no section {want}",
                p.display()
            );
        }
        let svgs: Vec<_> = doc
            .descendants()
            .filter(|n| n.has_tag_name("svg"))
            .collect();
        assert!(!svgs.is_empty(), "{}: no figure", p.display());
        for s in svgs {
            let w: f64 = s.attribute("width").unwrap().parse().unwrap();
            let h: f64 = s.attribute("height").unwrap().parse().unwrap();
            assert!(w > 0.0 && h > 0.0);
        }
        // The convention is named and cited, the caution is there, and so is the
        // command that reproduces the report.
        assert!(html.contains("Cornfield and Tukey 1956") || html.contains("Searle"));
        assert!(html.contains("statistician"));
        assert!(html.contains("emsplan report"));
        // No scripts, no network.
        assert!(!html.contains("<script"));
        assert!(
            !html.contains("http://")
                || html.matches("http://").count()
                    == html.matches("http://www.w3.org/2000/svg").count()
        );
    }
}

/// A layout with power figures gets a power curve per key term.
#[test]
fn power_curves_for_planned_terms() {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("problems/growth-chambers.toml");
    let (_, html, _) = report(&p, &[]);
    assert!(
        html.matches("Power of the ").count() >= 5,
        "one curve per testable term"
    );
    assert!(
        html.contains("Under the unrestricted convention these terms would be tested differently")
    );
}

#[test]
fn markdown_report_writes_its_figures() {
    for p in problems() {
        let dir = scratch(p.file_stem().unwrap().to_str().unwrap());
        let md = dir.join("supplement.md");
        let (code, out, err) = report(&p, &["--markdown", "-o", md.to_str().unwrap()]);
        assert_eq!(code, 0, "{err}");
        assert!(out.is_empty());
        let text = std::fs::read_to_string(&md).unwrap();
        assert!(text.starts_with("# "));
        let links: Vec<&str> = text
            .split("](")
            .skip(1)
            .map(|s| s.split(')').next().unwrap())
            .filter(|s| s.ends_with(".svg"))
            .collect();
        assert!(!links.is_empty());
        for l in links {
            let svg = std::fs::read_to_string(dir.join(l))
                .unwrap_or_else(|_| panic!("missing figure {l}"));
            roxmltree::Document::parse(&svg).unwrap_or_else(|e| panic!("{l}: {e}"));
        }
    }
}

/// Opens each report in headless Chromium and checks every figure was laid out with a
/// non-zero size. Fails where Chromium is not installed: .ci/run installs Debian's
/// chromium package, and a developer installs it with `apt-get install chromium`.
#[test]
fn figures_render_in_a_browser() {
    let browser = ["/usr/bin/chromium", "/usr/bin/chromium-browser"]
        .into_iter()
        .find(|b| Path::new(b).exists())
        .expect("Chromium is needed for this test: apt-get install chromium");
    for p in problems() {
        let (_, html, _) = report(&p, &[]);
        let probe = "<script>document.addEventListener('DOMContentLoaded',function(){var r=[];document.querySelectorAll('svg').forEach(function(s){var b=s.getBoundingClientRect();r.push(b.width+'x'+b.height);});document.body.setAttribute('data-figure-sizes',r.join(';'));});</script></body>";
        let probed = html.replace("</body>", probe);
        let dir = scratch(&format!(
            "browser-{}",
            p.file_stem().unwrap().to_str().unwrap()
        ));
        let file = dir.join("probe.html");
        std::fs::write(&file, probed).unwrap();
        let out = Command::new(browser)
            .args([
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--disable-quic",
                "--no-first-run",
                "--disable-background-networking",
                "--disable-component-update",
                "--disable-sync",
                "--window-size=1000,1400",
            ])
            .arg(format!("--user-data-dir={}", dir.join("profile").display()))
            .arg("--dump-dom")
            .arg(format!("file://{}", file.display()))
            .output()
            .unwrap();
        let dom = String::from_utf8_lossy(&out.stdout);
        let sizes = dom
            .split("data-figure-sizes=\"")
            .nth(1)
            .and_then(|s| s.split('"').next())
            .unwrap_or_else(|| panic!("{}: the browser did not lay out the page", p.display()));
        let n_svg = html.matches("<svg").count();
        let sizes: Vec<&str> = sizes.split(';').collect();
        assert_eq!(sizes.len(), n_svg, "{}: every figure measured", p.display());
        for s in sizes {
            let (w, h) = s.split_once('x').unwrap();
            let (w, h): (f64, f64) = (w.parse().unwrap(), h.parse().unwrap());
            assert!(w > 0.0 && h > 0.0, "{}: a figure has size {s}", p.display());
        }
    }
}
