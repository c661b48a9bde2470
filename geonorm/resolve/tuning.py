"""The resolver's tuning constants, one place for all of them.

Each says what it does and where its value came from: "tuned on the development
set" (``tests/data/locations_dev.csv``, read together with the reference tests
against ISO 3166, CLDR and GeoNames) or "from memory" (a judgement, not fitted).
Changing any of them changes answers: bump ``RESOLVER_VERSION`` in
``resolver.py`` and refit the calibration (``python -m geonorm.review.refit``).
"""

from __future__ import annotations

# -- the answer ---------------------------------------------------------------
# Confidence needed for "matched"; 0.7 keeps precision above 0.99 on the
# development set (see README); raise it for stricter output.
DEFAULT_ACCEPT = 0.70
# A cell longer than this many characters (a pasted document) is read up to here
# (from memory: a location is short).
MAX_TEXT = 500

# -- the weight of one reading (stages.place_weight) --------------------------
# Trust in a name by where it comes from: curated aliases and official names over
# alternate spellings, translations and short forms (tuned on the development set).
ORIGIN_WEIGHT = {
    "name": 1.0,
    "alias": 5.0,
    "code2": 1.0,
    "code3": 1.0,
    "sub_code": 0.8,
    "postal": 1.0,
    "translation": 0.8,
    "alt": 0.3,
    "lower_sub": 0.05,
    "adjective": 0.6,
    "region": 1.0,
    "short": 0.2,
    "abbreviation": 0.5,
}
# Trust in a name of an origin missing from ORIGIN_WEIGHT (from memory).
OTHER_ORIGIN_WEIGHT = 0.5
# A country named in the text is rarely meant as anything else (tuned on the development set).
KIND_WEIGHT = {"country": 3.0, "subdivision": 1.0, "city": 1.0, "area": 1.0, "region": 1.0}
# Population floor so places of unknown population still count (from memory).
MIN_WEIGHT = 300.0

# -- spelling-tolerant matching (mentions.py, stages.FuzzyMatcher) ------------
# Shortest phrase, in letters, tried with typos tolerated (tuned on the development set).
FUZZY_MIN_LEN = 6
# A part explained only by places smaller than this may be a misspelt big one
# ("Johannesberg" is a German village) (tuned on the development set).
FIRM_PLACE_POP = 15000
# ... but a town at least this big met by its own name is taken as written
# (tuned on the development set).
FIRM_TOWN_POP = 5000
# A close spelling of a whole part replaces its pieces ("Ne York" → York) when it
# weighs at least this many times their heaviest reading (tuned on the development set).
RESPELL_ADVANTAGE = 5

# -- the word prior (mentions.place_prior) ------------------------------------
# A place name is expected to be this common (Zipf scale, wordfreq) for places of
# renown r (weight, cities times fame): BASE + SLOPE * log10(r); commoner than that,
# it is likely an ordinary word. Steep: a town of 100,000 named like a common word
# ("Orange", "Providence") is mostly the word, a world city ("Paris") the city
# (tuned on the development set).
ORDINARY_ZIPF_BASE = -7.3
ORDINARY_ZIPF_SLOPE = 2.0
# ... plus this much where the text's language is spoken in the place's country:
# places are written about most at home ("Paris" in French) (tuned on the
# development set) ...
HOME_LANGUAGE_BONUS = 1.0
# ... for places at least this big (from memory: a hamlet is not written about).
HOME_PLACE_POP = 100_000
# Softness of that boundary, in Zipf units (tuned on the development set).
ORDINARY_SCALE = 0.35
# Among words that name nothing, a place name must be this much more renowned (Zipf
# units) to be read as a place: prose is made of ordinary words ("hustle,
# providence and jollof") (tuned on the development set).
RUNNING_TEXT_SHIFT = 1.0
# A word such as "in", "near" or "ex" before a place at least this renowned makes
# it a place, as if it stood alone ("backyard in Cairns") (from memory).
INTRODUCED_RENOWN = 100_000
# How much commonness counts where the word stands: among words that name nothing,
# as a later part of its own, at the head of the text, or as the first part that is
# nothing but the name (from memory).
ORDINARY_CONTEXT = {"running": 0.8, "aside": 0.7, "lead": 0.4, "alone": 0.15}
# A word at least this common (Zipf scale) in the text's language is an ordinary
# word: a text of nothing else names no place (from memory: wordfreq's small lists
# start about here).
ORDINARY_WORD_ZIPF = 3.0
# Beside a place named clearly, a place whose prior is below this share of its prior
# is an ordinary word, not a second place (tuned on the development set).
COMPARABLE_PRIOR = 0.5
# A text whose every mention has a prior below this, made of ordinary words, is not
# a place (tuned on the development set).
JUNK_PRIOR = 0.4
# An answer's score is multiplied by min(1, prior / PRIOR_FULL) of its weakest place
# (tuned on the development set).
PRIOR_FULL = 0.8

# -- pruning readings a reader would not consider (mentions.prune) ------------
# A town named like a country survives next to the country only from this size
# (Lebanon, PA does not) (tuned on the development set).
CITY_BESIDE_COUNTRY_POP = 1_000_000
# A town named like a world region or named area survives only from this size
# (Middle East, MD does not) (tuned on the development set).
CITY_BESIDE_AREA_POP = 100_000
# A city called exactly this from this size demotes places that carry the name only
# as a variant (Islamabad, not Chittagong's old name) (tuned on the development set).
MAIN_NAME_POP = 100_000
# ... and from this size a country whose name it is only in another language
# (Salvador, Bahia) (tuned on the development set).
MAIN_NAME_OVER_TRANSLATION_POP = 500_000
# Weight factor of the demoted readings above (tuned on the development set).
VARIANT_DEMOTION = 0.2
# In a text of several mentions, places smaller than this met only by an alternate or
# short name are noise: a street word, "one", "plot" (tuned on the development set).
HAMLET_POP = 15_000

# -- weighing a place (decide.country_shares) ---------------------------------
# A typo reading's weight is multiplied by similarity to this power (tuned on the
# development set).
SIMILARITY_POWER = 4
# Number of names GeoNames knows a typical city by; a city's weight is scaled by
# sqrt((1 + fame) / (1 + FAME_TYPICAL)) (tuned on the development set).
FAME_TYPICAL = 20

# -- the decision (decide.py) -------------------------------------------------
# Prior odds against a person naming places in several countries: most multi-part
# strings are one country (tuned on the development set).
MULTI_PENALTY = 0.2
# A place is clear when one country has this share of it ... (tuned on the development set)
CLEAR_SHARE = 0.9
# ... and next to a clear place, a place whose best country has less than this share
# ("Centro") says nothing (tuned on the development set).
VAGUE_SHARE = 0.5
# A stray place next to others counts only from this size, or as a container
# (a word that happens to be a town's name) (tuned on the development set).
STRAY_PLACE_POP = 20000
# Countries below this share are left out of the evidence (from memory).
MIN_EVIDENCE_SHARE = 0.005
# Countries kept in the evidence, and candidates listed for review (from memory).
MAX_CANDIDATES = 5
# Several countries, none with this share: a country, subdivision or lone-city answer
# is "ambiguous" (tuned on the development set).
AMBIGUOUS_SHARE = 0.9

# -- a city against the country or subdivision of the same name (decide.city_point) --
# A country name is a city only when the city has this share of its population
# (Singapore, not Kosovo Polje for "Kosovo") (tuned on the development set).
CITY_OF_COUNTRY_SHARE = 0.5
# A subdivision named like its capital is the city unless the city weighs less than
# this share of it (Lisbon is the city, Quebec the province) (tuned on the development set).
CAPITAL_SHARE = 0.1
# A subdivision named like a city elsewhere wins unless the city weighs at least this
# share of it; between it and 1, only the country is determined (tuned on the development set).
CITY_OVER_SUBDIVISION_SHARE = 0.5

# -- the evidence score (decide.evidence_score) -------------------------------
# The score is multiplied by the worst typo similarity to this power (tuned on the
# development set).
SPELLING_POWER = 1.5
# Factor per unexplained word in a part that names the place ... (tuned on the development set)
STRAY_WORD_FACTOR = 0.85
# ... counted up to this many words (tuned on the development set); an ordinary word
# of the text's language counts as this share of one (tuned on the development set).
MAX_STRAY_WORDS = 3
ORDINARY_STRAY_WEIGHT = 0.25
# Factor for a whole part nobody explained, not a street line (tuned on the development set).
LOOSE_PART_FACTOR = 0.95
# A bare town below this size met only by an alternate name ... (tuned on the development set)
SMALL_ALT_POP = 15_000
# ... has its score multiplied by this (tuned on the development set).
SMALL_ALT_FACTOR = 0.75
# A bare town's score is multiplied by min(1, SIZE_BASE + SIZE_SLOPE * log10(population))
# (tuned on the development set).
SIZE_BASE = 0.3
SIZE_SLOPE = 0.15
# Factor for a text named only by a nationality word ("Brazilian") (tuned on the
# development set).
ADJECTIVE_FACTOR = 0.6
# Scores are kept inside (SCORE_FLOOR, SCORE_CEILING) so the calibration's logit
# stays finite (from memory).
SCORE_FLOOR = 1e-4
SCORE_CEILING = 0.9999

# -- the file prior (prior.py) ------------------------------------------------
# How far the file's country mix may lean an ambiguous name: shares are raised to this
# power (0 = ignore the file, 1 = full Bayes). Low because a file's majority says
# little about one person's town (tuned on the development set).
PRIOR_EXPONENT = 0.3
# Added to every country's share, so a country absent from the file is not ruled out
# (tuned on the development set).
PRIOR_FLOOR = 0.02
# Only answers matched at least this confidently form the prior (from memory).
PRIOR_MIN_CONFIDENCE = 0.9
# A file with fewer confidently matched rows has no prior (from memory).
PRIOR_MIN_ROWS = 50
