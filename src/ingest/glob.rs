//! File-name patterns of export files.

/// Glob match on a file name with `*` (any run) and `?` (one character), in linear time
/// (backtracking only to the last `*`). The tailer, `replay` and `check` all use it.
pub fn name_matches(pattern: &str, name: &str) -> bool {
    let pat: Vec<char> = pattern.chars().collect();
    let s: Vec<char> = name.chars().collect();
    let (mut p, mut i) = (0, 0);
    let mut star: Option<(usize, usize)> = None;
    while i < s.len() {
        if p < pat.len() && (pat[p] == '?' || (pat[p] != '*' && pat[p] == s[i])) {
            p += 1;
            i += 1;
        } else if p < pat.len() && pat[p] == '*' {
            star = Some((p, i));
            p += 1;
        } else if let Some((sp, si)) = star {
            p = sp + 1;
            i = si + 1;
            star = Some((sp, si + 1));
        } else {
            return false;
        }
    }
    pat[p..].iter().all(|&c| c == '*')
}

/// Whether an export file name is read: it matches `pattern` and none of the `exclude` patterns.
pub fn selects(pattern: &str, exclude: &[String], name: &str) -> bool {
    name_matches(pattern, name) && !exclude.iter().any(|x| name_matches(x, name))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn glob_names() {
        assert!(name_matches("sru_*.csv", "sru_2026-12-01.csv"));
        assert!(!name_matches("sru_*.csv", "sru_2026-12-01.csv.tmp"));
        assert!(name_matches("a?c", "abc"));
        assert!(name_matches("*", "anything"));
        let exclude = vec!["*_long.csv".to_string(), "sru_2026-12-02.csv".to_string()];
        assert!(selects("sru_*.csv", &exclude, "sru_2026-12-01.csv"));
        assert!(!selects("sru_*.csv", &exclude, "sru_2026-12-01_long.csv"));
        assert!(!selects("sru_*.csv", &exclude, "sru_2026-12-02.csv"));
        assert!(!selects("sru_*.csv", &[], "other.csv"));
    }
}
