//! Invented names for the scenario: mapper handles, street and business names, editor names,
//! changeset comments. All are built from made-up syllables and plain English words, so none
//! names a real place, person or product; nothing here contains a web address or phone number.

use std::collections::BTreeSet;

use rand::seq::SliceRandom;
use rand::Rng;
use rand_chacha::ChaCha8Rng;

const SYLLABLES: [&str; 40] = [
    "ka", "lo", "mir", "ven", "tas", "ul", "bre", "dor", "fen", "gal", "hu", "is", "jor", "kel",
    "lun", "mor", "nax", "ob", "pel", "quo", "ras", "sil", "tor", "ur", "vex", "wyn", "yal", "zer",
    "ath", "eb", "im", "oss", "und", "ry", "cai", "dri", "esk", "fio", "gur", "hask",
];

const ADJECTIVES: [&str; 14] = [
    "Copper", "Salt", "Gilded", "Quiet", "Amber", "Drifting", "Lantern", "Crooked", "Velvet",
    "Tidal", "Bright", "Hidden", "Silver", "Windward",
];

const NOUNS: [&str; 12] = [
    "Heron", "Otter", "Anchor", "Gull", "Kettle", "Lobster", "Skiff", "Ladle", "Compass", "Oar",
    "Thimble", "Lamp",
];

const STREET_KINDS: [&str; 7] = ["Street", "Lane", "Row", "Road", "Way", "Walk", "Terrace"];

/// Invented editor software names for `created_by`.
pub(super) const EDITORS: [&str; 5] = [
    "Marrowdraw 2.4.1",
    "Marrowdraw 2.5.0",
    "Tidepen 1.9 (desktop)",
    "Pebblegrid 0.7.3 (android)",
    "Lumenplot 3.1.2",
];

/// Plain `source` values.
pub(super) const SOURCES: [&str; 5] = [
    "survey",
    "local knowledge",
    "aerial imagery",
    "survey;aerial imagery",
    "gps traces",
];

/// Hands out names, never the same handle, street or business twice.
pub(super) struct Names {
    used: BTreeSet<String>,
}

fn capitalise(s: &str) -> String {
    let mut c = s.chars();
    c.next().map_or_else(String::new, |f| {
        f.to_uppercase().chain(c).collect::<String>()
    })
}

fn pick<'a>(rng: &mut ChaCha8Rng, list: &[&'a str]) -> &'a str {
    list.choose(rng).copied().unwrap_or("")
}

impl Names {
    pub fn new() -> Self {
        Self {
            used: BTreeSet::new(),
        }
    }

    fn syllables(rng: &mut ChaCha8Rng, min: usize, max: usize) -> String {
        let n = rng.gen_range(min..=max);
        (0..n).map(|_| pick(rng, &SYLLABLES)).collect()
    }

    /// A made-up family name such as "Torvexil".
    pub fn surname(rng: &mut ChaCha8Rng) -> String {
        capitalise(&Self::syllables(rng, 2, 3))
    }

    fn unique(&mut self, rng: &mut ChaCha8Rng, make: impl Fn(&mut ChaCha8Rng) -> String) -> String {
        for _ in 0..50 {
            let s = make(rng);
            if self.used.insert(s.clone()) {
                return s;
            }
        }
        // Crowded name space: a numbered variant is always new.
        let base = make(rng);
        let mut k = 2;
        loop {
            let s = format!("{base} {k}");
            if self.used.insert(s.clone()) {
                return s;
            }
            k += 1;
        }
    }

    /// A mapper handle such as "kelmorvex" or "ras_dor42".
    pub fn handle(&mut self, rng: &mut ChaCha8Rng) -> String {
        self.unique(rng, |rng| {
            let mut s = Self::syllables(rng, 2, 3);
            match rng.gen_range(0..4) {
                0 => s.push_str(&rng.gen_range(1..100).to_string()),
                1 => {
                    s.push('_');
                    s.push_str(&Self::syllables(rng, 1, 2));
                }
                _ => {}
            }
            s
        })
    }

    /// A street name such as "Kelmor Lane".
    pub fn street(&mut self, rng: &mut ChaCha8Rng) -> String {
        self.unique(rng, |rng| {
            format!(
                "{} {}",
                capitalise(&Self::syllables(rng, 2, 3)),
                pick(rng, &STREET_KINDS)
            )
        })
    }

    /// A business name fitting an OSM `shop` or `amenity` value.
    pub fn business(&mut self, rng: &mut ChaCha8Rng, what: &str) -> String {
        let what = what.to_owned();
        self.unique(rng, move |rng| {
            let s = Self::surname(rng);
            let a = pick(rng, &ADJECTIVES);
            let n = pick(rng, &NOUNS);
            match what.as_str() {
                "bakery" => format!("{s} Bakery"),
                "cafe" => {
                    if rng.gen_bool(0.5) {
                        format!("Cafe {s}")
                    } else {
                        format!("The {a} Cup")
                    }
                }
                "restaurant" => format!("{s}'s Kitchen"),
                "pub" => format!("The {a} {n}"),
                "clothes" => format!("{s} Outfitters"),
                "books" => format!("{s} Books"),
                "hardware" => format!("{s} Hardware"),
                "butcher" => format!("{s} Butchers"),
                "florist" => format!("{s} Flowers"),
                "pharmacy" => format!("{s} Pharmacy"),
                "bank" => format!("{s} Savings Bank"),
                "convenience" => format!("{s} Corner Shop"),
                "hairdresser" => format!("{a} Scissors"),
                "gift" => format!("The {a} {n} Gifts"),
                "fishmonger" | "seafood" => format!("{s} Fish"),
                "place_of_worship" => format!("Chapel of {s}"),
                "school" => format!("{s} School"),
                "farm" => format!("{s} Farm"),
                "wood" => format!("{s} Wood"),
                _ => format!("{s} & {}", Self::surname(rng)),
            }
        })
    }
}

/// A plain changeset comment for ordinary work of the given kind in a place.
pub(super) fn comment(rng: &mut ChaCha8Rng, templates: &[&str], place: &str) -> String {
    pick(rng, templates).replace("{place}", place)
}
