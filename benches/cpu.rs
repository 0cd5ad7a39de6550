//! What every benchmark prints beside its wall time (included by each with
//! `#[path = "cpu.rs"] mod cpu;`).

/// CPU seconds (user + system) of this process so far, from `/proc/self/stat`
/// (Linux, 100 ticks per second); NaN elsewhere. Printed beside the wall time
/// because the wall time is meaningless on a machine shared with other jobs.
pub fn cpu_seconds() -> f64 {
    let Ok(stat) = std::fs::read_to_string("/proc/self/stat") else {
        return f64::NAN;
    };
    // Fields after the parenthesised command name; utime and stime are fields 14, 15.
    let Some(rest) = stat.rsplit_once(')').map(|(_, r)| r) else {
        return f64::NAN;
    };
    let f: Vec<&str> = rest.split_whitespace().collect();
    let ticks = |k: usize| {
        f.get(k)
            .and_then(|v| v.parse::<f64>().ok())
            .unwrap_or(f64::NAN)
    };
    (ticks(11) + ticks(12)) / 100.0
}
