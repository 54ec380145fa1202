//! Every stage of the tool scored against the second scenario's truth
//! (`glitchbook::scenario`, invented site QM4), for three seeds: generate,
//! scan all channels, cluster, witnesses, vetoes with the injections, all
//! through the library, then per-stage scores and times.
//!
//! Run: `cargo bench --bench scenario_stages` (2 h per seed; set
//! `GLITCHBOOK_SCENARIO_HOURS` for another length and
//! `GLITCHBOOK_SCENARIO_SEEDS=1,2,3` for other seeds).
use glitchbook::scenario::pipeline::{run_stages, StageOptions, StageRun};
use glitchbook::scenario::{write_scenario, ScenarioOptions};

fn peak_rss_mib() -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kib: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib / 1024.0)
}

fn cpu_s() -> f64 {
    // utime + stime of this process from /proc/self/stat, in clock ticks (100/s).
    std::fs::read_to_string("/proc/self/stat")
        .ok()
        .and_then(|s| {
            let rest = s.rsplit_once(')')?.1;
            let f: Vec<&str> = rest.split_whitespace().collect();
            Some((f.get(11)?.parse::<f64>().ok()? + f.get(12)?.parse::<f64>().ok()?) / 100.0)
        })
        .unwrap_or(f64::NAN)
}

fn main() -> anyhow::Result<()> {
    let hours: f64 = std::env::var("GLITCHBOOK_SCENARIO_HOURS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(2.0);
    let seeds: Vec<u64> = std::env::var("GLITCHBOOK_SCENARIO_SEEDS")
        .ok()
        .map(|v| v.split(',').filter_map(|x| x.trim().parse().ok()).collect())
        .unwrap_or_else(|| vec![1, 2, 3]);
    println!(
        "second scenario (QM4), {hours} h per seed, seeds {seeds:?}, {} rayon threads",
        rayon::current_num_threads()
    );
    let mut runs: Vec<(u64, StageRun)> = Vec::new();
    for &seed in &seeds {
        let tmp = tempfile::tempdir()?;
        let dir = tmp.path().join("qm4");
        let (c0, t0) = (cpu_s(), std::time::Instant::now());
        let sc = write_scenario(
            &dir,
            &ScenarioOptions {
                seed,
                hours,
                ..ScenarioOptions::default()
            },
        )?;
        let (gen_wall, gen_cpu) = (t0.elapsed().as_secs_f64(), cpu_s() - c0);
        let rss_gen = peak_rss_mib().unwrap_or(f64::NAN);
        let o = StageOptions {
            cluster: glitchbook::families::ClusterParams {
                seed,
                ..Default::default()
            },
            ..StageOptions::default()
        };
        let r = run_stages(&sc, &tmp.path().join("glitchbook.db"), &o)?;
        println!("\n=== seed {seed} ===");
        println!(
            "generate {gen_wall:.1} s wall ({gen_cpu:.1} s CPU; peak RSS so far {rss_gen:.0} MiB); \
             scan {:.1} s ({} triggers, all channels); cluster {:.1} s ({} families); witnesses {:.2} s; vetoes {:.2} s",
            r.times.scan_s,
            r.n_triggers,
            r.times.cluster_s,
            r.n_families.unwrap_or(0),
            r.times.witnesses_s,
            r.times.vetoes_s
        );
        for m in &sc.mechanisms {
            print!(
                "{} {} ({} in trains)  ",
                m.name, m.n_injected, m.n_in_trains
            );
        }
        println!();
        print!("{}", r.score.render());
        runs.push((seed, r));
    }

    // The headline figures, one column per seed.
    println!("\n=== summary over seeds {seeds:?} ===");
    let col = |f: &dyn Fn(&StageRun) -> String| {
        runs.iter()
            .map(|(_, r)| f(r))
            .collect::<Vec<_>>()
            .join("  ")
    };
    let opt = |v: Option<f64>| v.map_or("-".into(), |x| format!("{x:.2}"));
    println!("recall at true SNR 8-12 | >= 10 | median equivalent/true SNR (>= 8):");
    for (i, m) in runs[0].1.score.triggers.mechanisms.iter().enumerate() {
        println!(
            "  {:<10} {}",
            m.mechanism,
            col(&|r| {
                let x = &r.score.triggers.mechanisms[i];
                format!(
                    "{} | {} | {}",
                    opt(x.bins[1].recall()),
                    opt(x.recall_ge10),
                    opt(x.median_snr_ratio_ge8)
                )
            })
        );
    }
    println!(
        "  noise triggers far from glitches [/h]: {}",
        col(&|r| format!("{:.1}", r.score.triggers.noise.far_per_hour))
    );
    println!(
        "families: n | ARI in family | completeness | homogeneity | ARI all (no family = a cluster) | answered: {}",
        col(&|r| match &r.score.families {
            Some(f) => format!(
                "{} | {:.2} | {:.2} | {:.2} | {:.2} | {:.2}",
                r.n_families.unwrap_or(0),
                f.ari_in_family,
                f.hcv_in_family.completeness,
                f.hcv_in_family.homogeneity,
                f.ari_all,
                f.answered_fraction
            ),
            None => "-".into(),
        })
    );
    println!(
        "witnesses right (of {} mechanisms): {}",
        runs[0].1.score.witnesses.len(),
        col(&|r| r
            .score
            .witnesses
            .iter()
            .filter(|w| w.correct)
            .count()
            .to_string())
    );
    println!(
        "vetoes proposed: right channel | wrong channel | injection channel proposed | injections cut: {}",
        col(&|r| match &r.score.vetoes {
            Some(v) => format!(
                "{} | {} | {} | {:.2}",
                v.rounds.iter().filter(|x| x.proposed && x.right_channel).count(),
                v.n_proposed_wrong,
                v.unsafe_proposed,
                v.injections_vetoed
            ),
            None => "-".into(),
        })
    );
    println!(
        "peak RSS of the whole bench: {:.0} MiB",
        peak_rss_mib().unwrap_or(f64::NAN)
    );
    Ok(())
}
