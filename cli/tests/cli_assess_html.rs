//! `midge assess --html` in a real browser: headless chromium renders the
//! page of the bundled caps demo to a PNG and dumps its DOM; every chart must
//! be there and have drawn something, and the screenshot must show the
//! charts' colours. Skips without chromium unless MIDGE_REQUIRE_BROWSER=1.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("..")
}

fn tmp(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("midge-html-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// The charts the page draws for an int8 model with `--also-fp16`.
const CHARTS: [&str; 8] = [
    "confusion",
    "confusion-float",
    "sqnr",
    "logit-error",
    "logit-error-fp16",
    "budget",
    "memory",
    "latency",
];

fn chromium() -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    ["chromium", "chromium-browser"]
        .iter()
        .flat_map(|n| std::env::split_paths(&path).map(move |d| d.join(n)))
        .find(|p| p.is_file())
}

/// Runs chromium headless on `page` with `args`; its stdout.
fn run_chromium(exe: &Path, dir: &Path, page: &Path, args: &[String]) -> Vec<u8> {
    let mut child = Command::new(exe)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--hide-scrollbars",
        ])
        .arg(format!("--user-data-dir={}", dir.join("profile").display()))
        .args(args)
        .arg(format!("file://{}", page.display()))
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("start chromium");
    let start = Instant::now();
    let out = std::thread::spawn({
        let mut so = child.stdout.take().unwrap();
        move || {
            let mut v = Vec::new();
            std::io::Read::read_to_end(&mut so, &mut v).ok();
            v
        }
    });
    loop {
        if let Some(status) = child.try_wait().unwrap() {
            assert!(status.success(), "chromium {args:?}: {status}");
            break;
        }
        if start.elapsed() > Duration::from_secs(180) {
            child.kill().ok();
            panic!("chromium {args:?} did not finish in 180 s");
        }
        std::thread::sleep(Duration::from_millis(100));
    }
    out.join().unwrap()
}

/// `(data-chart name, count of drawn rect/path elements)` of every chart
/// `<svg>` in serialized HTML (attribute quotes of either kind).
fn charts(html: &str) -> Vec<(String, usize)> {
    let mut found = Vec::new();
    for part in html.split("<svg").skip(1) {
        let Some(tag_end) = part.find('>') else {
            continue;
        };
        let tag = &part[..tag_end];
        let Some(at) = tag.find("data-chart=") else {
            continue;
        };
        let rest = &tag[at + 11..];
        let q = rest.chars().next().unwrap();
        let name: String = rest[1..].chars().take_while(|&c| c != q).collect();
        let inner = &part[..part.find("</svg>").expect("closed svg")];
        let drawn = inner.matches("<rect").count() + inner.matches("<path").count();
        found.push((name, drawn));
    }
    found
}

#[test]
fn assess_page_renders_every_chart_in_a_browser() {
    let dir = tmp("render");
    let page = dir.join("r.html");
    let o = Command::new(env!("CARGO_BIN_EXE_midge"))
        .arg("assess")
        .arg(root().join("models/caps/plain.toml"))
        .args(["--no-emulate", "--also-fp16", "--json", "-o"])
        .arg(dir.join("plain.midge"))
        .arg("--html")
        .arg(&page)
        .output()
        .expect("run midge");
    assert!(
        matches!(o.status.code(), Some(0) | Some(4)),
        "{}",
        String::from_utf8_lossy(&o.stderr)
    );
    // --json still prints the report beside the page.
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).expect("JSON on stdout");
    let hist = &v["report"]["logit_error_histogram"]["counts"];
    let total: u64 = hist
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c.as_u64().unwrap())
        .sum();
    // Every logit of every image is counted once: 400 images × 4 classes.
    assert_eq!(total, v["report"]["images"].as_u64().unwrap() * 4);
    // Its range is ± the largest logit error the report states.
    let h = &v["report"]["logit_error_histogram"];
    let max = v["report"]["max_abs_logit_error"].as_f64().unwrap();
    assert!(max > 0.0);
    assert_eq!(
        (h["lo"].as_f64(), h["hi"].as_f64()),
        (Some(-max), Some(max))
    );

    let html = std::fs::read_to_string(&page).unwrap();
    for external in ["<script", "<link", "src=", "url(", "@import"] {
        assert!(!html.contains(external), "not self-contained: {external}");
    }
    let in_file = charts(&html);
    let names: Vec<&str> = in_file.iter().map(|(n, _)| n.as_str()).collect();
    assert_eq!(names, CHARTS, "charts in the file");

    let Some(exe) = chromium() else {
        let why = "chromium not found on PATH (apt-get install -y chromium)";
        assert!(
            std::env::var("MIDGE_REQUIRE_BROWSER").as_deref() != Ok("1"),
            "MIDGE_REQUIRE_BROWSER=1: {why}"
        );
        eprintln!("skipped the browser check: {why}");
        return;
    };
    let (w, h) = (1200u32, 2400u32);
    let png = dir.join("r.png");
    run_chromium(
        &exe,
        &dir,
        &page,
        &[
            format!("--screenshot={}", png.display()),
            format!("--window-size={w},{h}"),
        ],
    );
    let bytes = std::fs::read(&png).expect("screenshot written");
    // PNG signature and the IHDR chunk first (PNG spec, ISO/IEC 15948:2004,
    // 5.2 and 11.2.2): width and height big-endian at bytes 16..24.
    assert_eq!(&bytes[..8], b"\x89PNG\r\n\x1a\n");
    assert_eq!(&bytes[12..16], b"IHDR");
    let dim = |i: usize| u32::from_be_bytes(bytes[i..i + 4].try_into().unwrap());
    assert_eq!((dim(16), dim(20)), (w, h));
    assert!(bytes.len() > 30_000, "screenshot of {} bytes", bytes.len());
    // The charts were painted, not only the text: the bar colour (#5fa596,
    // used by nothing else) fills the SQNR and histogram bars, and below the
    // header band (33 px) the dark teal (#23403a) at full opacity is a heat
    // map's diagonal cell with every image of its row right ("missing":
    // 100 of 100 in both maps, 62 × 62 px each).
    let img = image::load_from_memory(&bytes).unwrap().to_rgb8();
    let count = |rgb: [u8; 3]| {
        img.enumerate_pixels()
            .filter(|(_, y, p)| *y >= 40 && p.0 == rgb)
            .count()
    };
    assert!(count([0x5f, 0xa5, 0x96]) > 20_000, "bars drawn");
    assert!(count([0x23, 0x40, 0x3a]) > 3_000, "heat map drawn");

    let dom = run_chromium(&exe, &dir, &page, &["--dump-dom".into()]);
    let dom = String::from_utf8(dom).expect("DOM is UTF-8");
    let rendered = charts(&dom);
    let names: Vec<&str> = rendered.iter().map(|(n, _)| n.as_str()).collect();
    assert_eq!(names, CHARTS, "charts in the browser's DOM");
    for (name, drawn) in &rendered {
        assert!(*drawn >= 1, "chart {name} drew nothing");
    }
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn a_bad_html_path_is_one_line_and_writes_nothing() {
    let dir = tmp("bad");
    let model = dir.join("plain.midge");
    let o = Command::new(env!("CARGO_BIN_EXE_midge"))
        .arg("assess")
        .arg(root().join("models/caps/plain.toml"))
        .args(["--no-emulate", "-o"])
        .arg(&model)
        .arg("--html")
        .arg(dir.join("no-such-folder/r.html"))
        .output()
        .expect("run midge");
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{stderr}");
    assert_eq!(stderr.trim_end().lines().count(), 1, "{stderr}");
    assert!(stderr.contains("r.html"), "{stderr}");
    assert!(!model.exists(), "the model must not be written either");
    assert_eq!(std::fs::read_dir(&dir).unwrap().count(), 0);
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn emulated_latency_on_the_page_is_the_budgets_instruction_count() {
    let dir = tmp("emulated");
    let page = dir.join("r.html");
    let o = Command::new(env!("CARGO_BIN_EXE_midge"))
        .arg("assess")
        .arg(root().join("models/caps/plain.toml"))
        .args(["--json", "-o"])
        .arg(dir.join("plain.midge"))
        .arg("--html")
        .arg(&page)
        .output()
        .expect("run midge");
    let stderr = String::from_utf8_lossy(&o.stderr);
    // Under MIDGE_REQUIRE_EMULATOR=1 a missing emulator is already an error
    // of the binary (exit 2), so this fails rather than skips.
    assert!(matches!(o.status.code(), Some(0) | Some(4)), "{stderr}");
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).expect("JSON on stdout");
    let Some(instructions) = v["budget"]["instructions"].as_u64() else {
        eprintln!("skipped: the emulated run was not possible here: {stderr}");
        return;
    };
    let html = std::fs::read_to_string(&page).unwrap();
    let grouped: String = {
        let s = instructions.to_string();
        s.chars()
            .enumerate()
            .flat_map(|(i, c)| {
                let sep = i > 0 && (s.len() - i) % 3 == 0;
                sep.then_some('\u{2009}').into_iter().chain([c])
            })
            .collect()
    };
    assert!(html.contains("<h2>Instructions per layer — m4-80</h2>"));
    assert!(
        html.contains(&format!("for one inference: {grouped} instructions")),
        "page total is not the budget's {instructions}"
    );
    let latency = charts(&html)
        .into_iter()
        .find(|(n, _)| n == "latency")
        .expect("latency chart");
    // One bar per runtime layer: as many as the report's per-layer rows.
    assert_eq!(latency.1, v["report"]["layers"].as_array().unwrap().len());
    std::fs::remove_dir_all(&dir).ok();
}
