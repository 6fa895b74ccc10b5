//! "Did you mean ...?" suggestions for misspelled keys and ids, by edit distance.

/// Levenshtein distance between two strings, counted in Unicode scalar values.
pub fn edit_distance(a: &str, b: &str) -> usize {
    let b_chars: Vec<char> = b.chars().collect();
    let mut previous: Vec<usize> = (0..=b_chars.len()).collect();
    let mut current = vec![0; b_chars.len() + 1];
    for (i, ca) in a.chars().enumerate() {
        current[0] = i + 1;
        for (j, cb) in b_chars.iter().enumerate() {
            let substitution = previous[j] + usize::from(ca != *cb);
            let deletion = previous[j + 1] + 1;
            let insertion = current[j] + 1;
            current[j + 1] = substitution.min(deletion).min(insertion);
        }
        std::mem::swap(&mut previous, &mut current);
    }
    previous[b_chars.len()]
}

/// The candidate closest to `word`, if it is close enough to be a plausible typo: at most 1 edit for
/// words of up to 3 characters, 2 up to 6, 3 beyond. Case is ignored when measuring, so `Length`
/// suggests `length`. Ties go to the earliest candidate.
pub fn closest<'a>(word: &str, candidates: impl IntoIterator<Item = &'a str>) -> Option<&'a str> {
    let length = word.chars().count();
    let allowed = match length {
        0..=3 => 1,
        4..=6 => 2,
        _ => 3,
    };
    let word_lower = word.to_lowercase();
    let mut best: Option<(usize, &'a str)> = None;
    for candidate in candidates {
        if candidate == word {
            continue;
        }
        let distance = edit_distance(&word_lower, &candidate.to_lowercase());
        if distance <= allowed && best.is_none_or(|(d, _)| distance < d) {
            best = Some((distance, candidate));
        }
    }
    best.map(|(_, candidate)| candidate)
}

/// `"; did you mean `x`?"` or nothing.
pub fn did_you_mean<'a>(word: &str, candidates: impl IntoIterator<Item = &'a str>) -> String {
    closest(word, candidates)
        .map(|candidate| format!("; did you mean `{candidate}`?"))
        .unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn distances() {
        // Textbook Levenshtein examples (common practice, no source): kitten -> sitting is 3 edits.
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("", "abc"), 3);
        assert_eq!(edit_distance("flaw", "lawn"), 2);
        assert_eq!(edit_distance("\u{e9}l\u{e9}", "ele"), 2);
    }

    #[test]
    fn suggestions() {
        assert_eq!(
            closest("diamter", ["length", "diameter", "c"]),
            Some("diameter")
        );
        assert_eq!(closest("Length", ["length", "diameter"]), Some("length"));
        assert_eq!(closest("J-110", ["J-101", "T-1"]), Some("J-101"));
        assert_eq!(closest("reservoir", ["length", "diameter"]), None);
        assert_eq!(did_you_mean("zzzz", ["a"]), "");
    }
}
