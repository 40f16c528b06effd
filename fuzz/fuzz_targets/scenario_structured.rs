//! Structured scenarios: every table and field of the format (`[behaviour]`, `[finance]`, group
//! size ranges and growing loans and incomes included), present or missing, with plausible values,
//! extreme numbers, NaN and infinity spellings, huge integers, unicode text, deep sweeps and many
//! shocks, written as TOML text and run through what the binary does with a file.
//! Set FUZZ_PRINT_TOML=1 when replaying an input to see the text it stands for.
#![no_main]

use libfuzzer_sys::fuzz_target;
use loancycle_fuzz::ScenarioSpec;

fuzz_target!(|spec: ScenarioSpec| {
    let text = spec.to_toml();
    if std::env::var_os("FUZZ_PRINT_TOML").is_some() {
        eprintln!("{text}");
    }
    loancycle_fuzz::exercise(&text);
});
