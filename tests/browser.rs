//! report.html in a real browser: headless Chromium opens it from a file:// URL, runs its
//! script, and we read back the DOM (rows, sorting, script errors) and a screenshot (not
//! blank). Skipped with a message when no Chromium is installed (.ci/run installs it).

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use slackmap::report;

fn chromium() -> Option<PathBuf> {
    let fixed = PathBuf::from("/usr/bin/chromium");
    if fixed.is_file() {
        return Some(fixed);
    }
    std::env::var_os("PATH")?
        .to_str()?
        .split(':')
        .map(|d| Path::new(d).join("chromium"))
        .find(|p| p.is_file())
}

/// Catches uncaught errors and console errors of the page, as a marker element in the DOM.
const PROBE: &str = "<script>(function(){function mark(m){var d=document.createElement('div');\
d.id='page-error';d.textContent=String(m);(document.body||document.documentElement).appendChild(d);}\
window.addEventListener('error',function(e){mark(e.message);});\
var ce=console.error;console.error=function(){mark(Array.prototype.join.call(arguments,' '));\
ce.apply(console,arguments);};})();</script>";

/// Clicks the first heading (rank) of the edge table once, after the page's own script ran.
const CLICK_RANK: &str = "<script>document.querySelector('#edge-table th').click();</script>";

/// Runs Chromium headless on `page` with `extra` flags; returns stdout. Fails after 90 s.
fn run(browser: &Path, page: &Path, extra: &[String]) -> String {
    let profile = tempfile::tempdir().expect("profile dir");
    let mut cmd = Command::new(browser);
    cmd.args([
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
    ])
    .arg(format!("--user-data-dir={}", profile.path().display()))
    .args(extra)
    .arg(format!("file://{}", page.display()))
    .stdin(Stdio::null())
    .stdout(Stdio::piped())
    .stderr(Stdio::null());
    let mut child = cmd.spawn().expect("start chromium");
    let mut stdout = child.stdout.take().expect("stdout");
    let reader = std::thread::spawn(move || {
        let mut s = String::new();
        let _ = std::io::Read::read_to_string(&mut stdout, &mut s);
        s
    });
    let deadline = Instant::now() + Duration::from_secs(90);
    loop {
        if child.try_wait().expect("wait").is_some() {
            break;
        }
        if Instant::now() > deadline {
            let _ = child.kill();
            panic!("chromium did not finish within 90 s");
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    reader.join().expect("reader")
}

/// Writes the report of a fixture into `dir`, with `head` right after `<head>` and `tail`
/// right before `</body>`; returns the page's path.
fn page(dir: &Path, fixture: &str, head: &str, tail: &str) -> (PathBuf, usize) {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/audit").join(fixture);
    let audit = report::json::read(&path).expect("fixture");
    let out = dir.join("out");
    report::write_folder(&out, &report::audit_files(&audit)).expect("write");
    let html_path = out.join("report.html");
    let html = std::fs::read_to_string(&html_path).expect("read page");
    let html = html.replacen("<head>", &format!("<head>{head}"), 1).replacen(
        "</body>",
        &format!("{tail}</body>"),
        1,
    );
    let probed = out.join("probed.html");
    std::fs::write(&probed, html).expect("write page");
    (probed, audit.edges.len())
}

/// The `data-sort` keys of the rank column, in DOM order.
fn rank_keys(dom: &str) -> Vec<Option<f64>> {
    dom.split("<tr class=\"edge verdict-")
        .skip(1)
        .map(|row| {
            let k =
                row.split("data-sort=\"").nth(1).and_then(|r| r.split('"').next()).unwrap_or("");
            k.parse().ok()
        })
        .collect()
}

#[test]
fn report_runs_in_chromium_without_errors() {
    let Some(browser) = chromium() else {
        skipped("chromium not installed");
        return;
    };
    for fixture in ["grid-4x4.json", "grid-12x12.json"] {
        let dir = tempfile::tempdir().expect("tempdir");
        let (path, edges) = page(dir.path(), fixture, PROBE, CLICK_RANK);
        let dom = run(&browser, &path, &["--dump-dom".into()]);
        assert!(dom.contains("id=\"edge-table\""), "{fixture}: no edge table in the DOM");
        assert!(
            !dom.contains("id=\"page-error\""),
            "{fixture}: script error: {}",
            dom.split("id=\"page-error\"")
                .nth(1)
                .unwrap_or("")
                .chars()
                .take(300)
                .collect::<String>()
        );
        assert!(dom.contains("data-sort-ready=\"yes\""), "{fixture}: the sort script did not run");
        let keys = rank_keys(&dom);
        assert_eq!(keys.len(), edges, "{fixture}: one row per edge after scripts ran");
        // After one click on "rank": ascending, unranked pairs last.
        assert!(dom.contains("aria-sort=\"ascending\""), "{fixture}");
        let ranked: Vec<f64> = keys.iter().map_while(|k| *k).collect();
        assert!(ranked.windows(2).all(|w| w[0] <= w[1]), "{fixture}: {ranked:?}");
        assert!(keys[ranked.len()..].iter().all(Option::is_none), "{fixture}: unranked rows last");

        let shot = dir.path().join("shot.png");
        run(
            &browser,
            &path,
            &[format!("--screenshot={}", shot.display()), "--window-size=1280,2000".into()],
        );
        let (colours, ink) = picture_stats(&shot);
        assert!(colours >= 16, "{fixture}: only {colours} distinct colours");
        assert!(ink > 0.03, "{fixture}: only {:.1}% non-white pixels", ink * 100.0);
        if let Some(keep) = std::env::var_os("SLACKMAP_KEEP_SCREENSHOTS") {
            let _ = std::fs::copy(&shot, Path::new(&keep).join(fixture.replace(".json", ".png")));
        }
    }
}

/// The error probe itself works: a page that throws is caught.
#[test]
fn the_error_probe_catches_a_throwing_page() {
    let Some(browser) = chromium() else {
        skipped("chromium not installed");
        return;
    };
    let dir = tempfile::tempdir().expect("tempdir");
    let (path, _) = page(
        dir.path(),
        "grid-4x4.json",
        PROBE,
        "<script>throw new Error('probe-works');</script>",
    );
    let dom = run(&browser, &path, &["--dump-dom".into()]);
    assert!(dom.contains("id=\"page-error\"") && dom.contains("probe-works"), "{}", dom.len());
}

/// Distinct colours and the fraction of pixels that are not near-white.
fn picture_stats(path: &Path) -> (usize, f64) {
    let file = std::io::BufReader::new(std::fs::File::open(path).expect("screenshot written"));
    let mut decoder = png::Decoder::new(file);
    decoder.set_transformations(png::Transformations::EXPAND | png::Transformations::STRIP_16);
    let mut reader = decoder.read_info().expect("png header");
    let mut buf = vec![0; reader.output_buffer_size().expect("size")];
    let info = reader.next_frame(&mut buf).expect("png frame");
    let channels = info.color_type.samples();
    let mut colours = std::collections::HashSet::new();
    let mut ink = 0usize;
    let pixels = (info.width * info.height) as usize;
    for p in buf[..pixels * channels].chunks(channels) {
        let rgb = [p[0], p.get(1).copied().unwrap_or(p[0]), p.get(2).copied().unwrap_or(p[0])];
        colours.insert(rgb);
        if rgb.iter().any(|&c| c < 235) {
            ink += 1;
        }
    }
    (colours.len(), ink as f64 / pixels.max(1) as f64)
}

/// Reports a test that cannot run here; CI sets SLACKMAP_REQUIRE_TOOLS so that it fails there.
fn skipped(what: &str) {
    assert!(
        std::env::var_os("SLACKMAP_REQUIRE_TOOLS").is_none(),
        "{what}, but SLACKMAP_REQUIRE_TOOLS is set: .ci/run should have installed it"
    );
    println!("SKIPPED: {what}");
}
