//! `kernlake demo`: the cold-store scenario end to end on generated data.

use crate::band::render_band_svg;
use crate::data::{discover, CsvOptions, ResolvedColumns, TableReader};
use crate::demo::{generate, months, DemoSpec, FEATURES, TARGET};
use crate::error::{Error, Result};
use crate::fit::{FitOptions, Fitter};
use crate::metrics::MetricsAccumulator;
use crate::report::render_training;
use crate::score::{format_time, score_files, Quiet, ScoreOptions};
use crate::settings::defaults::BAND_LEVEL;

use super::args::DemoArgs;
use super::progress::{rows_bar, EpochBars};

/// The partition folder naming a site.
const SITE: &str = "site";

/// Runs `kernlake demo`.
pub fn run(a: DemoArgs, quiet: bool) -> Result<i32> {
    let spec = DemoSpec {
        rows: a.rows,
        sites: 40,
        seed: a.seed,
        start_year: 2025,
    };
    let data_dir = a.dir.join("data");
    if data_dir.exists() {
        std::fs::remove_dir_all(&data_dir).map_err(|e| Error::io(&data_dir, e))?;
    }
    crate::atomic::create_dir_durable(&data_dir)?;
    let bar = rows_bar(quiet, a.rows, "generate");
    let summary = generate(&data_dir, &spec, &|r| bar.set_position(r))?;
    bar.finish_and_clear();
    if !quiet {
        eprintln!(
            "kernlake demo: {} rows in {} Parquet files under {} ({:.1} MB)",
            summary.rows,
            summary.files,
            data_dir.display(),
            summary.bytes as f64 / 1e6
        );
    }
    if a.data_only {
        return Ok(0);
    }
    let all_months = months(&spec);
    let last = all_months.last().cloned().unwrap_or_default();
    let files = discover(&[data_dir.display().to_string()])?;
    let is_last =
        |f: &crate::data::SourceFile| f.partitions.iter().any(|(k, v)| k == "month" && *v == last);
    let (test_files, train_files): (Vec<_>, Vec<_>) = files.into_iter().partition(is_last);
    let columns = ResolvedColumns {
        // The site (its partition folder's number) is an input too: each site has its own
        // plant (envelope, condenser, efficiency) that the conditions alone do not show,
        // and a fleet model that cannot tell sites apart needs a band wide enough to hold
        // all of them, too wide to see one site drift by 15 %.
        features: FEATURES
            .iter()
            .chain(std::iter::once(&SITE))
            .map(|s| s.to_string())
            .collect(),
        target: Some(TARGET.to_string()),
    };
    let train_rows: u64 = train_files.iter().filter_map(|f| f.rows).sum();
    let reader = TableReader::new(train_files, columns.clone()).with_csv(CsvOptions::default());
    let opts = FitOptions {
        holdout: 0.05,
        // The holdout error flattens several passes before the Newton certificate reaches
        // the tolerance; a longer patience lets the demo show the certified optimum.
        patience: 5,
        max_epochs: a.epochs,
        sweeps_per_block: 3,
        memory_bytes: 4 << 30,
        seed: a.seed,
        threads: a.threads,
        map: crate::features::MapSpec {
            dim: a.dim,
            seed: a.seed,
            ..Default::default()
        },
        ..FitOptions::default()
    };
    if !quiet {
        eprintln!("kernlake demo: fitting on every month but {last} ({train_rows} rows)");
    }
    let survey_bar = rows_bar(quiet, train_rows, "survey");
    let epochs = EpochBars::new(quiet, train_rows);
    let model =
        Fitter::from_options(opts).fit_files(&reader, &epochs, &|r| survey_bar.set_position(r))?;
    survey_bar.finish_and_clear();
    let model_path = a.dir.join("cold-store.klm");
    model.save(&model_path)?;
    print!("{}", render_training(&model.report));
    println!("model written to {}", model_path.display());

    // The held-out month: scored to Parquet with the saved model (as `kernlake score`
    // would), then compared with the measured power, site by site for coverage.
    let scores_dir = a.dir.join("scores");
    let score_opts = ScoreOptions {
        out_dir: scores_dir.clone(),
        threads: a.threads,
        overwrite: true,
        band: model.band.as_ref().map(|_| BAND_LEVEL),
        time_column: model.band.as_ref().map(|_| "ts".to_string()),
        group_column: model.band.as_ref().map(|_| "site".to_string()),
        ..ScoreOptions::default()
    };
    let scored = score_files(&model, &test_files, &score_opts, &Quiet)?;
    let hot = summary.hot_site.to_string();
    let test = TableReader::new(test_files, columns);
    let mut acc = MetricsAccumulator::new(model.problem.epsilon);
    let (mut hot_rows, mut hot_flagged) = (0u64, 0u64);
    for block in test.blocks()? {
        let block = block?;
        let Some(y) = &block.y else { continue };
        let f = model.predict(block.x.view());
        acc.add(y.view(), f.view());
        let site = test.files()[block.file_index]
            .partition("site")
            .map(|s| s.trim_start_matches('0'));
        if let (Some(cov), Some(site)) = (&model.coverage, site) {
            if site == hot.as_str() {
                let mut xs = block.x.clone();
                model.scaler.apply(xs.view_mut());
                let v = cov.values(xs.view());
                hot_rows += v.len() as u64;
                hot_flagged += v.iter().filter(|&&c| c < cov.threshold).count() as u64;
            }
        }
    }
    let m = acc.finish();
    println!("held-out month {last} ({} rows, kW)", m.n);
    println!("  {:<22} {:.3}", "RMSE", m.rmse);
    println!("  {:<22} {:.3}", "MAE", m.mae);
    println!("  {:<22} {:.4}", "R²", m.r2);
    println!(
        "  {:<22} {} of {} rows ({} of {} at the hot-climate site {})",
        "outside coverage",
        scored.rows_uncovered,
        scored.rows_written,
        hot_flagged,
        hot_rows,
        summary.hot_site
    );
    println!("  {:<22} {}", "scores written to", scores_dir.display());
    if let Some(r) = &scored.deviation {
        let ts_type = arrow_schema::DataType::Timestamp(
            arrow_schema::TimeUnit::Millisecond,
            Some("UTC".into()),
        );
        println!();
        println!(
            "deviation report for {last} (band at level {BAND_LEVEL}; injected fault: site {} losing compressor efficiency from {}; hot-climate site {})",
            summary.fault_site,
            format_time(summary.fault_start_ms, Some(&ts_type)),
            summary.hot_site
        );
        print!("{}", r.to_text());
        // The band's coverage on the sites that are neither faulty nor beyond the
        // training range: what a healthy plant should show.
        let special = [summary.fault_site.to_string(), summary.hot_site.to_string()];
        let healthy = r
            .groups
            .iter()
            .filter(|g| !special.contains(&g.name.trim_start_matches('0').to_string()));
        let (rows, outside) = healthy.fold((0u64, 0u64), |(n, o), g| (n + g.rows, o + g.outside));
        if rows > 0 {
            println!(
                "observed band coverage on the {} healthy sites: {:.2}% of {} rows (level {:.0}%)",
                r.groups.len().saturating_sub(2),
                100.0 * (1.0 - outside as f64 / rows as f64),
                rows,
                100.0 * BAND_LEVEL
            );
        }
        let report_path = a.dir.join("deviation.json");
        let plot_path = a.dir.join("deviation.svg");
        crate::atomic::write_atomic(&report_path, |f| {
            use std::io::Write;
            f.write_all(r.to_json().as_bytes())
                .map_err(|e| Error::io(&report_path, e))
        })?;
        crate::atomic::write_atomic(&plot_path, |f| {
            use std::io::Write;
            f.write_all(render_band_svg(r, TARGET).as_bytes())
                .map_err(|e| Error::io(&plot_path, e))
        })?;
        println!(
            "report written to {}, plot of the worst site to {}",
            report_path.display(),
            plot_path.display()
        );
    }
    println!();
    println!("{}", super::args::SAFETY);
    Ok(0)
}
