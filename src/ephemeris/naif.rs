//! NAIF integer body codes and names.
//!
//! # References
//! NAIF Integer ID codes, Required Reading (`naif_ids.req`), sections
//! "Planets and Satellites" and "Barycenters".

/// Standard NAIF codes of the bodies that planetary ephemerides carry.
const BODIES: &[(i32, &str)] = &[
    (0, "SOLAR SYSTEM BARYCENTER"),
    (1, "MERCURY BARYCENTER"),
    (2, "VENUS BARYCENTER"),
    (3, "EARTH BARYCENTER"),
    (4, "MARS BARYCENTER"),
    (5, "JUPITER BARYCENTER"),
    (6, "SATURN BARYCENTER"),
    (7, "URANUS BARYCENTER"),
    (8, "NEPTUNE BARYCENTER"),
    (9, "PLUTO BARYCENTER"),
    (10, "SUN"),
    (199, "MERCURY"),
    (299, "VENUS"),
    (301, "MOON"),
    (399, "EARTH"),
    (499, "MARS"),
    (599, "JUPITER"),
    (699, "SATURN"),
    (799, "URANUS"),
    (899, "NEPTUNE"),
    (999, "PLUTO"),
];

/// Other names accepted for the same codes (NAIF `naif_ids.req` synonyms).
const ALIASES: &[(&str, i32)] = &[("SSB", 0), ("SOLAR_SYSTEM_BARYCENTER", 0), ("EMB", 3), ("EARTH-MOON BARYCENTER", 3), ("EARTH MOON BARYCENTER", 3)];

fn normalise(name: &str) -> String {
    name.trim().to_ascii_uppercase().replace('_', " ")
}

/// NAIF code of a body given by name (case-insensitive; `_` = space) or by
/// its integer code written as text. `extra` adds names (e.g. spacecraft
/// declared in a pipeline).
pub fn body_id(name: &str, extra: &[(String, i32)]) -> Option<i32> {
    if let Ok(id) = name.trim().parse::<i32>() {
        return Some(id);
    }
    let n = normalise(name);
    BODIES
        .iter()
        .find(|(_, b)| *b == n)
        .map(|(id, _)| *id)
        .or_else(|| ALIASES.iter().find(|(a, _)| normalise(a) == n).map(|(_, id)| *id))
        .or_else(|| extra.iter().find(|(a, _)| normalise(a) == n).map(|(_, id)| *id))
}

/// Name of a NAIF code, or the code itself as text.
pub fn body_name(id: i32) -> String {
    BODIES.iter().find(|(i, _)| *i == id).map(|(_, n)| n.to_string()).unwrap_or_else(|| format!("NAIF {id}"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_and_codes() {
        assert_eq!(body_id("earth", &[]), Some(399));
        assert_eq!(body_id("Jupiter_Barycenter", &[]), Some(5));
        assert_eq!(body_id("EMB", &[]), Some(3));
        assert_eq!(body_id("-77", &[]), Some(-77));
        assert_eq!(body_id("lapse probe", &[("LAPSE PROBE".into(), -901)]), Some(-901));
        assert_eq!(body_id("vulcan", &[]), None);
        assert_eq!(body_name(10), "SUN");
        assert_eq!(body_name(-5), "NAIF -5");
    }
}
