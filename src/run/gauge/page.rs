//! `gauge.html`: the study on one page — what was repeated, the verdict, the pooled figures
//! and a table per site. Plain HTML, no script; a missing figure is shown as `–`.

use super::figures::{Scatter, PT_ACCEPTABLE, PT_GOOD};
use super::GaugeReport;

fn nm(v: Option<f64>) -> String {
    v.filter(|x| x.is_finite())
        .map_or("–".to_string(), |x| format!("{x:.4}"))
}

fn escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}

fn row(label: &str, s: &Scatter) -> String {
    format!(
        "<tr><td>{label}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>\n",
        s.count,
        nm(s.mean_nm),
        nm(s.repeatability_nm),
        nm(s.reproducibility_nm),
        nm(s.combined_nm),
        nm(s.fit_sigma_nm),
        nm(s.crb_nm)
    )
}

/// The page of a study.
pub fn html(r: &GaugeReport) -> String {
    let c = &r.capability;
    let spec = c
        .spec_nm
        .map_or("none".to_string(), |[lo, hi]| format!("[{lo}, {hi}] nm"));
    let mut out = String::new();
    out.push_str("<!doctype html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\n");
    out.push_str(&format!("<title>Gauge study {}</title>\n", escape(&r.run)));
    out.push_str(
        "<style>body{font-family:sans-serif;margin:2em;max-width:70em}table{border-collapse:collapse}\
         td,th{border:1px solid #bbb;padding:.25em .6em;text-align:right}td:first-child{text-align:left}\
         .verdict{font-size:1.3em;font-weight:bold}</style></head><body>\n",
    );
    out.push_str(&format!(
        "<h1>Gauge study {}</h1>\n<p>{} study of {} ({}): {} site(s) × {} pass(es) × {} repeat(s){}; {} of {} readings journalled.</p>\n",
        escape(&r.run),
        r.study.mode.as_str(),
        escape(&r.layer),
        "thickness, nm",
        r.sites.len(),
        r.study.passes,
        r.study.repeats,
        if r.study.mode == crate::run::plan::GaugeMode::Dynamic {
            format!(", leaving {} mm between repeats", r.study.away_mm)
        } else {
            String::new()
        },
        r.measured,
        r.planned
    ));
    out.push_str(&format!(
        "<p class=\"verdict\">Verdict: {} — P/T = {} against the spec window {spec}; ndc = {}</p>\n",
        escape(&c.verdict),
        c.p_to_t.map_or("–".to_string(), |v| format!("{v:.3}")),
        c.ndc.map_or("–".to_string(), |v| v.to_string()),
    ));
    out.push_str(&format!(
        "<p>P/T = 6σ/(USL − LSL) with σ the combined σ; good at P/T ≤ {PT_GOOD}, acceptable at ≤ {PT_ACCEPTABLE}, \
         above not fit (common practice). ndc = ⌊1.41·σ_part/σ⌋ with σ_part the site-to-site spread \
         (AIAG MSA, 4th ed., 2010, from memory); part σ {} nm.</p>\n",
        nm(c.part_sigma_nm)
    ));
    out.push_str(
        "<table><tr><th>site</th><th>readings</th><th>mean</th><th>repeatability σ</th>\
         <th>reproducibility σ</th><th>combined σ</th><th>fit σ</th><th>Cramér–Rao bound</th></tr>\n",
    );
    out.push_str(&row("pooled", &r.pooled));
    for s in &r.sites {
        out.push_str(&row(&format!("site {}", s.site), &s.scatter));
    }
    out.push_str(
        "</table>\n<p>All figures in nm. Repeatability: pooled within-pass σ; \
         reproducibility: the pass-to-pass part (one-way random-effects ANOVA); fit σ: the mean \
         of the fits' own σ; Cramér–Rao bound: σ_n/√Σ(∂R/∂d)² from the measured noise level σ_n \
         (Kay 1993, ch. 3). See docs/gauge.md.</p>\n</body></html>\n",
    );
    out
}
