//! What the live and checkpoint benches share: the export header and the unit they run (a
//! water heater with one feed, a duty tag and an effluent thermometer).

/// Header of the exports the benches write.
pub(crate) const HEADER: &str = "Timestamp,FI-101,TI-102,JI-103,TI-109";

/// One `[[unit]]` reading `plant_*.csv` in `dir` at `interval`.
pub(crate) fn unit_block(name: &str, dir: &str, interval: &str) -> String {
    format!(
        r#"
[[unit]]
name = "{name}"
[unit.input]
directory = "{dir}"
pattern = "plant_*.csv"
timestamp_column = "Timestamp"
[unit.timing]
interval = "{interval}"
max_wait = "30s"
[[unit.feed]]
flow = {{ tag = "FI-101", unit = "mol/s", uncertainty = "1 %" }}
temperature = {{ tag = "TI-102", unit = "degC", uncertainty = "0.5 K" }}
composition = {{ water = 1.0 }}
[unit.heater]
duty = {{ tag = "JI-103", unit = "kW", uncertainty = "2 %" }}
[unit.effluent]
temperature = {{ tag = "TI-109", unit = "degC", uncertainty = "0.3 K" }}
"#
    )
}
