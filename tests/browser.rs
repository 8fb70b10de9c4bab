//! report.html in a real browser: headless Chromium opens it from a file:// URL, runs its
//! script, and we read back the DOM (rows, sorting, script errors, the edge table scrolling
//! in its box with the edge column pinned, the drill-downs and their plots, the folded
//! intrinsic rows, the threshold on the legends) and a screenshot (not blank). Skipped with
//! a message when no Chromium is installed (.ci/run installs it).

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

/// Clicks the rank heading (the second: the edge is pinned first) of the edge table once,
/// after the page's own script ran.
const CLICK_RANK: &str =
    "<script>document.querySelector('#edge-table th:nth-child(2)').click();</script>";

/// Measures the edge table's box after scrolling it to the right end, and writes what it
/// found as attributes of a `#measure` element: the table overflows its box, the first
/// edge cell stays at the box's left edge (pinned), and the last heading comes into view.
const MEASURE: &str = "<script>(function(){var box=document.getElementById('edge-table-box');\
var m=document.createElement('div');m.id='measure';\
var over=box.scrollWidth>box.clientWidth+1;box.scrollLeft=box.scrollWidth;\
var b=box.getBoundingClientRect();\
var cell=document.querySelector('#edge-table tbody tr td.id').getBoundingClientRect();\
var heads=document.querySelectorAll('#edge-table thead th');\
var last=heads[heads.length-1].getBoundingClientRect();\
var page=document.documentElement.scrollWidth<=window.innerWidth+1;\
m.setAttribute('data-overflow',over?'yes':'no');\
m.setAttribute('data-scrolled',box.scrollLeft>0?'yes':'no');\
m.setAttribute('data-pinned',Math.abs(cell.left-b.left)<3?'yes':'no');\
m.setAttribute('data-last-visible',(last.right<=b.right+2&&last.left>=b.left)?'yes':'no');\
m.setAttribute('data-page-fits',page?'yes':'no');\
var plots=document.querySelectorAll('details.drill svg.depth-plot');var drawn=0;\
Array.prototype.forEach.call(plots,function(p){var r=p.getBoundingClientRect();\
if(p.querySelectorAll('circle.observed').length>0&&r.width>100){drawn++;}});\
m.setAttribute('data-plots',String(drawn));\
document.body.appendChild(m);})();</script>";

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

fn fixture_path(fixture: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/audit").join(fixture)
}

/// Writes the report of a fixture into `dir`, with `head` right after `<head>` and `tail`
/// right before `</body>`; returns the page's path.
fn page(dir: &Path, fixture: &str, head: &str, tail: &str) -> (PathBuf, usize) {
    let audit = report::json::read(&fixture_path(fixture)).expect("fixture");
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

/// The value of attribute `name` of the `#measure` element.
fn measured<'a>(dom: &'a str, name: &str) -> &'a str {
    let m = dom.split("id=\"measure\"").nth(1).unwrap_or("");
    let m = m.split('>').next().unwrap_or("");
    m.split(&format!("{name}=\"")).nth(1).and_then(|r| r.split('"').next()).unwrap_or("")
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
        let (path, edges) = page(dir.path(), fixture, PROBE, &format!("{CLICK_RANK}{MEASURE}"));
        let dom = run(&browser, &path, &["--dump-dom".into(), "--window-size=1280,2000".into()]);
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

        // The edge table scrolls inside its box, the page itself does not, and the edge
        // column stays in view while the last column is reached.
        for (name, want) in [
            ("data-overflow", "yes"),
            ("data-scrolled", "yes"),
            ("data-pinned", "yes"),
            ("data-last-visible", "yes"),
            ("data-page-fits", "yes"),
        ] {
            assert_eq!(measured(&dom, name), want, "{fixture}: {name}");
        }
        // One drill-down per flagged edge, each with a drawn plot per direction.
        let audit = report::json::read(&fixture_path(fixture)).expect("fixture");
        let flagged: Vec<_> =
            audit.edges.iter().filter(|e| e.verdict != report::Verdict::Clean).collect();
        assert_eq!(dom.matches("<details class=\"drill ").count(), flagged.len(), "{fixture}");
        for e in &flagged {
            assert!(dom.contains(&format!("id=\"drill-{}-{}\"", e.a, e.b)), "{fixture}");
            assert!(dom.contains(&format!("href=\"#drill-{}-{}\"", e.a, e.b)), "{fixture}");
        }
        assert_eq!(measured(&dom, "data-plots"), (2 * flagged.len()).to_string(), "{fixture}");
        // Reason codes with their legend; the threshold on both pictures' legends.
        assert!(dom.contains("id=\"why-legend\"") && dom.contains("above-threshold"));
        assert_eq!(dom.matches("class=\"threshold\"").count(), 2, "{fixture}");
        // Intrinsic kinds in layout order (q2 before q10), zero rows folded into one line.
        let table = dom.split("id=\"intrinsic-table\"").nth(1).unwrap_or("");
        let table = table.split("</table>").next().unwrap_or("");
        let (q2, q10) = (table.find(">sx@q2<"), table.find(">sx@q10<"));
        if let (Some(a), Some(b)) = (q2, q10) {
            assert!(a < b, "{fixture}: sx@q2 after sx@q10");
        }
        assert!(dom.contains("id=\"intrinsic-zero\""), "{fixture}: zero rows not folded");

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
