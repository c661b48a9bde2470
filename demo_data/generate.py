#!/usr/bin/env python3
"""Generate the geonorm demo data set: the member list of the (invented)
"Backyard Weather Network", a volunteer network of backyard weather-station
owners.  Every member, ID and join date is synthetic; only the place names
(cities, states, countries) are real, because resolving them is the point.

Usage::

    python demo_data/generate.py [--rows 20000] [--seed 20261201]
                                 [--out demo_data/members.csv] [--styles]

Output: UTF-8 CSV (no BOM, standard minimal quoting, ``\\n`` line endings)
with the columns ``member_id,joined,station_kind,location``.

The script is stdlib-only and deterministic: the same ``--seed`` and
``--rows`` always give a byte-identical file (one ``random.Random`` stream,
no iteration over sets or hash-ordered containers).

How each row is made
--------------------
1. ``joined``: a uniformly random day in 2015-01-01 .. 2026-10-31; all dates
   are drawn first and sorted, so member IDs (``BWN-000001`` ...) follow the
   order in which members joined.
2. The member's true country, from a weighted list of 60 countries
   (``COUNTRY_WEIGHTS``; heavy on US, GB, DE, IN, BR, CA, AU, FR, NL, JP).
3. ``station_kind``, from a base mix that a few countries tilt
   (``KIND_TILT``), so a per-country location quotient shows something:
   lightning detectors in US/BR, rain gauges in GB/IE (and IN), anemometers
   in NL/DK (and NO/IS), thermometers in AU.
4. A real city of that country, Zipf-like (weight ``1/rank**1.2``), so the
   first city in each list is by far the most common and strings repeat.
5. How the member typed the location (the ``location`` column), one of the
   styles below.

Typing styles (target share of all rows)
----------------------------------------
=====================  =====  ===============================================
style                  share  examples
=====================  =====  ===============================================
city_country             22%  "Toronto, Canada", "Lyon, FR", "München, Deutschland",
                              "Edinburgh, Scotland"
bare_city                15%  "Austin", "Sao Paulo", "Kraków"
city_state               10%  "Austin, TX", "Perth WA", "Curitiba - PR",
                              "Austin, TX, USA"; countries without a state
                              abbreviation use a region name ("Leeds, England",
                              "Munich, Bavaria") or fall back to city_country
country_only             10%  "USA", "Germany", "Deutschland", "Brasil", "日本",
                              "Nihon" (rare)
native                    6%  "東京", "Москва", "서울", "मुंबई", "القاهرة",
                              "São Paulo", "Köln"; countries with no local form
                              fall back to the native country name or the city
case_spacing              6%  "  new york ", "LONDON", "london,uk", "Sao  Paulo"
typo                      5%  one letter dropped, doubled or swapped:
                              "Chicgo", "Londdon", "Sydeny"
noisy_phrase              4%  "based in Lisbon", "vivo en Madrid", "wohne in Köln",
                              "Greater Manchester area", "📍Nairobi", "東京在住"
flag                      3%  "🇧🇷", "Berlin 🇩🇪", "🇫🇷 Paris", Scottish/Welsh/English
                              tag-sequence flags for some GB members
two_places                3%  "Berlin | Hamburg" (same country, 50%),
                              "Lisbon / Berlin" (different countries, 50%)
region                    2%  "Europe", "Scandinavia", "LATAM", "🇪🇺",
                              "Pacific Northwest", or a state alone ("Texas")
nickname                  2%  "NYC", "Philly", "KL", "Bombay", "Blighty", "Oz"
postcode                  1%  "75011 Paris", "D-10115 Berlin", "Sydney NSW 2000",
                              "〒150-0001 東京"; falls back to city_country
junk                      4%  "localhost", "Earth", "n/a", "-", "🏠", "somewhere",
                              "the internet", "Middle-earth", "under the weather"
empty                     7%  "" (about 1 in 12 of these is whitespace only)
=====================  =====  ===============================================

Run with ``--styles`` to print how often each style was drawn.  A few styles
fall back when a member's country has nothing to offer (native for US/AU/KE...,
postcode for cities without a known postcode range, nickname for countries
without nicknames), so the strings that really *look* native/postcode/nickname
are a little rarer than the drawn share, and plain city or "City, Country"
strings a little commoner.
"""

from __future__ import annotations

import argparse
import csv
import datetime as dt
import os
import random
import sys
from collections import Counter
from dataclasses import dataclass, field

DEFAULT_SEED = 20261201
DEFAULT_ROWS = 20000
DEFAULT_OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "members.csv")

DATE_FROM = dt.date(2015, 1, 1)
DATE_TO = dt.date(2026, 10, 31)

# --------------------------------------------------------------------------
# Typing styles and their target shares (percent; must sum to 100).
# --------------------------------------------------------------------------
STYLE_WEIGHTS: dict[str, float] = {
    "city_country": 22,
    "bare_city": 15,
    "city_state": 10,
    "country_only": 10,
    "native": 6,
    "case_spacing": 6,
    "typo": 5,
    "noisy_phrase": 4,
    "flag": 3,
    "two_places": 3,
    "region": 2,
    "nickname": 2,
    "postcode": 1,
    "junk": 4,
    "empty": 7,
}
assert abs(sum(STYLE_WEIGHTS.values()) - 100) < 1e-9

# --------------------------------------------------------------------------
# Station kinds: base mix and per-country tilts (multipliers).
# --------------------------------------------------------------------------
KINDS = ["full_station", "thermometer", "rain_gauge", "anemometer", "lightning_detector"]
KIND_BASE = {
    "full_station": 34,
    "thermometer": 22,
    "rain_gauge": 20,
    "anemometer": 14,
    "lightning_detector": 10,
}
KIND_TILT: dict[str, dict[str, float]] = {
    "US": {"lightning_detector": 2.0},
    "BR": {"lightning_detector": 2.4},
    "GB": {"rain_gauge": 1.8},
    "IE": {"rain_gauge": 2.0},
    "IN": {"rain_gauge": 1.4},
    "NL": {"anemometer": 2.1},
    "DK": {"anemometer": 2.1},
    "NO": {"anemometer": 1.5},
    "IS": {"anemometer": 1.6},
    "AU": {"thermometer": 1.3},
}

# --------------------------------------------------------------------------
# Countries.  Relative member weights (~60 countries).
# --------------------------------------------------------------------------
COUNTRY_WEIGHTS: dict[str, float] = {
    "US": 18,
    "GB": 8,
    "DE": 7,
    "IN": 6,
    "BR": 5,
    "CA": 5,
    "AU": 4,
    "FR": 4,
    "NL": 3,
    "JP": 3,
    "ES": 2.5,
    "IT": 2.5,
    "MX": 2,
    "SE": 1.5,
    "PL": 1.5,
    "CN": 1.5,
    "IE": 1.2,
    "DK": 1.2,
    "RU": 1.2,
    "KR": 1.2,
    "NO": 1.0,
    "CH": 1.0,
    "BE": 1.0,
    "PT": 1.0,
    "NZ": 1.0,
    "ZA": 1.0,
    "AR": 1.0,
    "AT": 0.9,
    "FI": 0.8,
    "UA": 0.8,
    "TR": 0.8,
    "NG": 0.8,
    "ID": 0.8,
    "PH": 0.8,
    "CO": 0.7,
    "CL": 0.6,
    "CZ": 0.6,
    "KE": 0.6,
    "TW": 0.6,
    "SG": 0.6,
    "TH": 0.6,
    "PK": 0.6,
    "GR": 0.5,
    "RO": 0.5,
    "IL": 0.5,
    "EG": 0.5,
    "MY": 0.5,
    "VN": 0.5,
    "PE": 0.4,
    "HU": 0.4,
    "HK": 0.4,
    "BD": 0.4,
    "AE": 0.4,
    "SA": 0.4,
    "MA": 0.3,
    "HR": 0.3,
    "RS": 0.3,
    "GH": 0.3,
    "IS": 0.2,
    "EE": 0.2,
}


@dataclass
class City:
    en: str  # English / most common Latin spelling
    local: str | None = None  # local Latin-script form if different ("München")
    script: list[str] = field(default_factory=list)  # native-script forms ("東京", "東京都")
    abbr: str | None = None  # state/province abbreviation ("TX", "NSW", "SP")
    region: str | None = None  # state/province/region name ("Texas", "Bavaria")


@dataclass
class Country:
    code: str
    en: list[str]  # English names, most common first
    codes: list[str]  # codes people type after a city ("FR", "FRA", "UK")
    native: list[str]  # Latin-script endonyms ("Deutschland")
    script: list[str]  # native-script endonyms ("日本")
    rare: list[str]  # rare romanisations ("Nihon")
    local_p: float  # how often members use the local city form
    lang: str  # language of local noisy phrases ("en" = none)
    cities: list[City]


def _c(spec: tuple) -> City:
    """Build a City from a compact tuple (en, local, script, abbr, region)."""
    en, local, script, abbr, region = (tuple(spec) + (None,) * 5)[:5]
    return City(
        en=en,
        local=local or None,
        script=[s for s in (script or "").split("|") if s],
        abbr=abbr or None,
        region=region or None,
    )


# (code, en names, typed codes, native names, native-script names, rare, local_p, lang, cities)
# City tuples: (English, local Latin form, native script forms "|"-separated,
#               state abbreviation, state/region name); "" means none.
_COUNTRY_SPECS: list[tuple] = [
    (
        "US",
        ["USA", "United States", "US", "U.S.", "America", "United States of America", "U.S.A."],
        ["US", "USA", "U.S."],
        [],
        [],
        [],
        0.0,
        "en",
        [
            ("New York", "", "", "NY", "New York"),
            ("Los Angeles", "", "", "CA", "California"),
            ("Chicago", "", "", "IL", "Illinois"),
            ("Houston", "", "", "TX", "Texas"),
            ("Austin", "", "", "TX", "Texas"),
            ("Seattle", "", "", "WA", "Washington"),
            ("Denver", "", "", "CO", "Colorado"),
            ("Boston", "", "", "MA", "Massachusetts"),
            ("San Francisco", "", "", "CA", "California"),
            ("Philadelphia", "", "", "PA", "Pennsylvania"),
            ("Miami", "", "", "FL", "Florida"),
            ("Atlanta", "", "", "GA", "Georgia"),
            ("Portland", "", "", "OR", "Oregon"),
            ("Minneapolis", "", "", "MN", "Minnesota"),
            ("Oklahoma City", "", "", "OK", "Oklahoma"),
        ],
    ),
    (
        "GB",
        ["UK", "United Kingdom", "Great Britain", "U.K.", "Britain"],
        ["UK", "GB", "GBR"],
        [],
        [],
        [],
        0.04,
        "en",
        [
            ("London", "", "", "", "England"),
            ("Manchester", "", "", "", "England"),
            ("Birmingham", "", "", "", "England"),
            ("Edinburgh", "", "", "", "Scotland"),
            ("Glasgow", "", "", "", "Scotland"),
            ("Bristol", "", "", "", "England"),
            ("Leeds", "", "", "", "England"),
            ("Cardiff", "Caerdydd", "", "", "Wales"),
            ("Liverpool", "", "", "", "England"),
            ("Newcastle", "Newcastle upon Tyne", "", "", "England"),
            ("Belfast", "", "", "", "Northern Ireland"),
            ("Sheffield", "", "", "", "England"),
            ("Nottingham", "", "", "", "England"),
            ("Brighton", "", "", "", "England"),
            ("Swansea", "Abertawe", "", "", "Wales"),
        ],
    ),
    (
        "DE",
        ["Germany"],
        ["DE", "GER", "DEU"],
        ["Deutschland"],
        [],
        ["BRD"],
        0.5,
        "de",
        [
            ("Berlin", "", "", "", ""),
            ("Munich", "München", "", "", "Bavaria"),
            ("Hamburg", "", "", "", ""),
            ("Cologne", "Köln", "", "", "North Rhine-Westphalia"),
            ("Frankfurt", "Frankfurt am Main", "", "", "Hesse"),
            ("Stuttgart", "", "", "", "Baden-Württemberg"),
            ("Dusseldorf", "Düsseldorf", "", "", "North Rhine-Westphalia"),
            ("Leipzig", "", "", "", "Saxony"),
            ("Dresden", "", "", "", "Saxony"),
            ("Nuremberg", "Nürnberg", "", "", "Bavaria"),
            ("Hanover", "Hannover", "", "", "Lower Saxony"),
            ("Bremen", "", "", "", ""),
            ("Freiburg", "Freiburg im Breisgau", "", "", "Baden-Württemberg"),
            ("Munster", "Münster", "", "", "North Rhine-Westphalia"),
        ],
    ),
    (
        "IN",
        ["India"],
        ["IN", "IND"],
        ["Bharat"],
        ["भारत"],
        ["Hindustan"],
        0.15,
        "en",
        [
            ("Mumbai", "", "मुंबई", "MH", "Maharashtra"),
            ("Delhi", "", "दिल्ली|नई दिल्ली", "DL", "Delhi"),
            ("Bangalore", "Bengaluru", "ಬೆಂಗಳೂರು", "KA", "Karnataka"),
            ("Chennai", "", "சென்னை", "TN", "Tamil Nadu"),
            ("Hyderabad", "", "హైదరాబాద్", "TG", "Telangana"),
            ("Kolkata", "", "কলকাতা", "WB", "West Bengal"),
            ("Pune", "", "पुणे", "MH", "Maharashtra"),
            ("Ahmedabad", "", "અમદાવાદ", "GJ", "Gujarat"),
            ("Jaipur", "", "जयपुर", "RJ", "Rajasthan"),
            ("Lucknow", "", "लखनऊ", "UP", "Uttar Pradesh"),
            ("Kochi", "", "കൊച്ചി", "KL", "Kerala"),
            ("Chandigarh", "", "चंडीगढ़", "CH", "Chandigarh"),
        ],
    ),
    (
        "BR",
        ["Brazil"],
        ["BR", "BRA"],
        ["Brasil"],
        [],
        [],
        0.5,
        "pt",
        [
            ("Sao Paulo", "São Paulo", "", "SP", "São Paulo"),
            ("Rio de Janeiro", "", "", "RJ", "Rio de Janeiro"),
            ("Belo Horizonte", "", "", "MG", "Minas Gerais"),
            ("Brasilia", "Brasília", "", "DF", "Distrito Federal"),
            ("Curitiba", "", "", "PR", "Paraná"),
            ("Porto Alegre", "", "", "RS", "Rio Grande do Sul"),
            ("Salvador", "", "", "BA", "Bahia"),
            ("Fortaleza", "", "", "CE", "Ceará"),
            ("Recife", "", "", "PE", "Pernambuco"),
            ("Manaus", "", "", "AM", "Amazonas"),
            ("Florianopolis", "Florianópolis", "", "SC", "Santa Catarina"),
            ("Campinas", "", "", "SP", "São Paulo"),
            ("Goiania", "Goiânia", "", "GO", "Goiás"),
            ("Belem", "Belém", "", "PA", "Pará"),
        ],
    ),
    (
        "CA",
        ["Canada"],
        ["CA", "CAN"],
        [],
        [],
        [],
        0.3,
        "en",
        [
            ("Toronto", "", "", "ON", "Ontario"),
            ("Vancouver", "", "", "BC", "British Columbia"),
            ("Montreal", "Montréal", "", "QC", "Quebec"),
            ("Calgary", "", "", "AB", "Alberta"),
            ("Ottawa", "", "", "ON", "Ontario"),
            ("Edmonton", "", "", "AB", "Alberta"),
            ("Winnipeg", "", "", "MB", "Manitoba"),
            ("Quebec City", "Québec", "", "QC", "Quebec"),
            ("Halifax", "", "", "NS", "Nova Scotia"),
            ("Victoria", "", "", "BC", "British Columbia"),
            ("Saskatoon", "", "", "SK", "Saskatchewan"),
            ("Hamilton", "", "", "ON", "Ontario"),
            ("London", "", "", "ON", "Ontario"),
            ("Regina", "", "", "SK", "Saskatchewan"),
        ],
    ),
    (
        "AU",
        ["Australia"],
        ["AU", "AUS"],
        [],
        [],
        [],
        0.0,
        "en",
        [
            ("Sydney", "", "", "NSW", "New South Wales"),
            ("Melbourne", "", "", "VIC", "Victoria"),
            ("Brisbane", "", "", "QLD", "Queensland"),
            ("Perth", "", "", "WA", "Western Australia"),
            ("Adelaide", "", "", "SA", "South Australia"),
            ("Canberra", "", "", "ACT", "Australian Capital Territory"),
            ("Hobart", "", "", "TAS", "Tasmania"),
            ("Gold Coast", "", "", "QLD", "Queensland"),
            ("Darwin", "", "", "NT", "Northern Territory"),
            ("Newcastle", "", "", "NSW", "New South Wales"),
            ("Townsville", "", "", "QLD", "Queensland"),
            ("Geelong", "", "", "VIC", "Victoria"),
            ("Cairns", "", "", "QLD", "Queensland"),
        ],
    ),
    (
        "FR",
        ["France"],
        ["FR", "FRA"],
        ["France"],
        [],
        [],
        0.3,
        "fr",
        [
            ("Paris", "", "", "", "Île-de-France"),
            ("Lyon", "", "", "", "Auvergne-Rhône-Alpes"),
            ("Marseille", "", "", "", "Provence-Alpes-Côte d'Azur"),
            ("Toulouse", "", "", "", "Occitanie"),
            ("Nice", "", "", "", "Provence-Alpes-Côte d'Azur"),
            ("Nantes", "", "", "", "Pays de la Loire"),
            ("Bordeaux", "", "", "", "Nouvelle-Aquitaine"),
            ("Strasbourg", "", "", "", "Alsace"),
            ("Montpellier", "", "", "", "Occitanie"),
            ("Lille", "", "", "", "Hauts-de-France"),
            ("Rennes", "", "", "", "Bretagne"),
            ("Grenoble", "", "", "", "Auvergne-Rhône-Alpes"),
            ("Brest", "", "", "", "Bretagne"),
            ("Dijon", "", "", "", "Bourgogne"),
        ],
    ),
    (
        "NL",
        ["Netherlands", "The Netherlands", "Holland"],
        ["NL", "NLD"],
        ["Nederland"],
        [],
        [],
        0.5,
        "nl",
        [
            ("Amsterdam", "", "", "", "North Holland"),
            ("Rotterdam", "", "", "", "South Holland"),
            ("The Hague", "Den Haag", "", "", "South Holland"),
            ("Utrecht", "", "", "", "Utrecht"),
            ("Eindhoven", "", "", "", "North Brabant"),
            ("Groningen", "", "", "", "Groningen"),
            ("Tilburg", "", "", "", "North Brabant"),
            ("Nijmegen", "", "", "", "Gelderland"),
            ("Leiden", "", "", "", "South Holland"),
            ("Delft", "", "", "", "South Holland"),
            ("Haarlem", "", "", "", "North Holland"),
            ("Maastricht", "", "", "", "Limburg"),
            ("Breda", "", "", "", "North Brabant"),
        ],
    ),
    (
        "JP",
        ["Japan"],
        ["JP", "JPN"],
        [],
        ["日本"],
        ["Nihon", "Nippon"],
        0.0,
        "ja",
        [
            ("Tokyo", "", "東京|東京都", "", ""),
            ("Osaka", "", "大阪|大阪市", "", ""),
            ("Yokohama", "", "横浜|横浜市", "", ""),
            ("Kyoto", "", "京都|京都市", "", ""),
            ("Nagoya", "", "名古屋|名古屋市", "", ""),
            ("Sapporo", "", "札幌|札幌市", "", "Hokkaido"),
            ("Fukuoka", "", "福岡|福岡市", "", ""),
            ("Kobe", "", "神戸|神戸市", "", ""),
            ("Sendai", "", "仙台|仙台市", "", ""),
            ("Hiroshima", "", "広島|広島市", "", ""),
            ("Naha", "", "那覇|那覇市", "", "Okinawa"),
        ],
    ),
    (
        "ES",
        ["Spain"],
        ["ES", "ESP"],
        ["España"],
        [],
        [],
        0.5,
        "es",
        [
            ("Madrid", "", "", "", ""),
            ("Barcelona", "", "", "", "Catalonia"),
            ("Valencia", "València", "", "", ""),
            ("Seville", "Sevilla", "", "", "Andalusia"),
            ("Zaragoza", "", "", "", "Aragon"),
            ("Malaga", "Málaga", "", "", "Andalusia"),
            ("Bilbao", "Bilbo", "", "", "Basque Country"),
            ("Palma", "Palma de Mallorca", "", "", "Balearic Islands"),
            ("Las Palmas", "Las Palmas de Gran Canaria", "", "", "Canary Islands"),
            ("Granada", "", "", "", "Andalusia"),
            ("A Coruna", "A Coruña", "", "", "Galicia"),
            ("Valladolid", "", "", "", "Castile and León"),
        ],
    ),
    (
        "IT",
        ["Italy"],
        ["IT", "ITA"],
        ["Italia"],
        [],
        [],
        0.5,
        "it",
        [
            ("Rome", "Roma", "", "", "Lazio"),
            ("Milan", "Milano", "", "", "Lombardy"),
            ("Naples", "Napoli", "", "", "Campania"),
            ("Turin", "Torino", "", "", "Piedmont"),
            ("Florence", "Firenze", "", "", "Tuscany"),
            ("Bologna", "", "", "", "Emilia-Romagna"),
            ("Venice", "Venezia", "", "", "Veneto"),
            ("Genoa", "Genova", "", "", "Liguria"),
            ("Palermo", "", "", "", "Sicily"),
            ("Bari", "", "", "", "Apulia"),
            ("Verona", "", "", "", "Veneto"),
            ("Padua", "Padova", "", "", "Veneto"),
            ("Trieste", "", "", "", "Friuli-Venezia Giulia"),
        ],
    ),
    (
        "MX",
        ["Mexico"],
        ["MX", "MEX"],
        ["México"],
        [],
        [],
        0.5,
        "es",
        [
            ("Mexico City", "Ciudad de México", "", "CDMX", "Mexico City"),
            ("Guadalajara", "", "", "Jal.", "Jalisco"),
            ("Monterrey", "", "", "NL", "Nuevo León"),
            ("Puebla", "", "", "Pue.", "Puebla"),
            ("Tijuana", "", "", "BC", "Baja California"),
            ("Merida", "Mérida", "", "Yuc.", "Yucatán"),
            ("Cancun", "Cancún", "", "Q.R.", "Quintana Roo"),
            ("Queretaro", "Querétaro", "", "Qro.", "Querétaro"),
            ("Leon", "León", "", "Gto.", "Guanajuato"),
            ("Oaxaca", "", "", "Oax.", "Oaxaca"),
        ],
    ),
    (
        "SE",
        ["Sweden"],
        ["SE", "SWE"],
        ["Sverige"],
        [],
        [],
        0.5,
        "sv",
        [
            ("Stockholm", "", "", "", ""),
            ("Gothenburg", "Göteborg", "", "", ""),
            ("Malmo", "Malmö", "", "", "Skåne"),
            ("Uppsala", "", "", "", ""),
            ("Vasteras", "Västerås", "", "", ""),
            ("Orebro", "Örebro", "", "", ""),
            ("Linkoping", "Linköping", "", "", ""),
            ("Umea", "Umeå", "", "", ""),
            ("Lund", "", "", "", "Skåne"),
            ("Kiruna", "", "", "", "Lapland"),
        ],
    ),
    (
        "PL",
        ["Poland"],
        ["PL", "POL"],
        ["Polska"],
        [],
        [],
        0.55,
        "en",
        [
            ("Warsaw", "Warszawa", "", "", ""),
            ("Krakow", "Kraków", "", "", ""),
            ("Lodz", "Łódź", "", "", ""),
            ("Wroclaw", "Wrocław", "", "", ""),
            ("Poznan", "Poznań", "", "", ""),
            ("Gdansk", "Gdańsk", "", "", ""),
            ("Szczecin", "", "", "", ""),
            ("Lublin", "", "", "", ""),
            ("Katowice", "", "", "", ""),
            ("Bialystok", "Białystok", "", "", ""),
        ],
    ),
    (
        "CN",
        ["China", "PRC", "People's Republic of China"],
        ["CN", "CHN", "PRC"],
        [],
        ["中国", "中國"],
        ["Zhongguo"],
        0.0,
        "zh",
        [
            ("Beijing", "", "北京|北京市", "", ""),
            ("Shanghai", "", "上海|上海市", "", ""),
            ("Guangzhou", "", "广州|广州市", "", ""),
            ("Shenzhen", "", "深圳|深圳市", "", ""),
            ("Chengdu", "", "成都", "", ""),
            ("Hangzhou", "", "杭州", "", ""),
            ("Wuhan", "", "武汉", "", ""),
            ("Xi'an", "", "西安", "", ""),
            ("Nanjing", "", "南京", "", ""),
            ("Chongqing", "", "重庆", "", ""),
            ("Tianjin", "", "天津", "", ""),
            ("Harbin", "", "哈尔滨", "", ""),
            ("Kunming", "", "昆明", "", ""),
        ],
    ),
    (
        "IE",
        ["Ireland", "Republic of Ireland", "ROI"],
        ["IE", "IRL"],
        ["Éire", "Eire"],
        [],
        [],
        0.05,
        "en",
        [
            ("Dublin", "Baile Átha Cliath", "", "", "Co. Dublin"),
            ("Cork", "Corcaigh", "", "", "Co. Cork"),
            ("Galway", "Gaillimh", "", "", "Co. Galway"),
            ("Limerick", "Luimneach", "", "", "Co. Limerick"),
            ("Waterford", "Port Láirge", "", "", "Co. Waterford"),
            ("Kilkenny", "Cill Chainnigh", "", "", "Co. Kilkenny"),
            ("Sligo", "Sligeach", "", "", "Co. Sligo"),
            ("Athlone", "Baile Átha Luain", "", "", "Co. Westmeath"),
        ],
    ),
    (
        "DK",
        ["Denmark"],
        ["DK", "DNK"],
        ["Danmark"],
        [],
        [],
        0.5,
        "da",
        [
            ("Copenhagen", "København", "", "", ""),
            ("Aarhus", "Århus", "", "", ""),
            ("Odense", "", "", "", ""),
            ("Aalborg", "Ålborg", "", "", ""),
            ("Esbjerg", "", "", "", ""),
            ("Roskilde", "", "", "", ""),
            ("Kolding", "", "", "", ""),
            ("Vejle", "", "", "", ""),
            ("Skagen", "", "", "", ""),
        ],
    ),
    (
        "RU",
        ["Russia", "Russian Federation"],
        ["RU", "RUS"],
        ["Rossiya"],
        ["Россия", "РФ"],
        [],
        0.0,
        "ru",
        [
            ("Moscow", "Moskva", "Москва", "", ""),
            ("Saint Petersburg", "Sankt-Peterburg", "Санкт-Петербург|СПб", "", ""),
            ("Novosibirsk", "", "Новосибирск", "", ""),
            ("Yekaterinburg", "", "Екатеринбург", "", ""),
            ("Kazan", "", "Казань", "", ""),
            ("Nizhny Novgorod", "", "Нижний Новгород", "", ""),
            ("Samara", "", "Самара", "", ""),
            ("Vladivostok", "", "Владивосток", "", ""),
            ("Krasnoyarsk", "", "Красноярск", "", ""),
            ("Kaliningrad", "", "Калининград", "", ""),
            ("Murmansk", "", "Мурманск", "", ""),
        ],
    ),
    (
        "KR",
        ["South Korea", "Korea", "Republic of Korea"],
        ["KR", "KOR", "ROK"],
        ["Hanguk"],
        ["대한민국", "한국"],
        ["Daehan Minguk"],
        0.0,
        "ko",
        [
            ("Seoul", "", "서울|서울특별시", "", ""),
            ("Busan", "", "부산", "", ""),
            ("Incheon", "", "인천", "", ""),
            ("Daegu", "", "대구", "", ""),
            ("Daejeon", "", "대전", "", ""),
            ("Gwangju", "", "광주", "", ""),
            ("Suwon", "", "수원", "", ""),
            ("Ulsan", "", "울산", "", ""),
            ("Jeju", "", "제주", "", ""),
        ],
    ),
    (
        "NO",
        ["Norway"],
        ["NO", "NOR"],
        ["Norge", "Noreg"],
        [],
        [],
        0.5,
        "no",
        [
            ("Oslo", "", "", "", ""),
            ("Bergen", "", "", "", ""),
            ("Trondheim", "", "", "", ""),
            ("Stavanger", "", "", "", ""),
            ("Tromso", "Tromsø", "", "", ""),
            ("Kristiansand", "", "", "", ""),
            ("Bodo", "Bodø", "", "", ""),
            ("Alesund", "Ålesund", "", "", ""),
            ("Drammen", "", "", "", ""),
            ("Fredrikstad", "", "", "", ""),
        ],
    ),
    (
        "CH",
        ["Switzerland"],
        ["CH", "CHE", "SUI"],
        ["Schweiz", "Suisse", "Svizzera"],
        [],
        ["Helvetia", "Svizra"],
        0.55,
        "de",
        [
            ("Zurich", "Zürich", "", "", ""),
            ("Geneva", "Genève", "", "", ""),
            ("Basel", "", "", "", ""),
            ("Bern", "", "", "", ""),
            ("Lausanne", "", "", "", ""),
            ("Lucerne", "Luzern", "", "", ""),
            ("Lugano", "", "", "", "Ticino"),
            ("St. Gallen", "", "", "", ""),
            ("Winterthur", "", "", "", ""),
        ],
    ),
    (
        "BE",
        ["Belgium"],
        ["BE", "BEL"],
        ["België", "Belgique", "Belgien"],
        [],
        [],
        0.5,
        "nl",
        [
            ("Brussels", "Bruxelles", "", "", ""),
            ("Antwerp", "Antwerpen", "", "", "Flanders"),
            ("Ghent", "Gent", "", "", "Flanders"),
            ("Bruges", "Brugge", "", "", "Flanders"),
            ("Liege", "Liège", "", "", "Wallonia"),
            ("Leuven", "", "", "", "Flanders"),
            ("Namur", "", "", "", "Wallonia"),
            ("Charleroi", "", "", "", "Wallonia"),
            ("Mechelen", "", "", "", "Flanders"),
        ],
    ),
    (
        "PT",
        ["Portugal"],
        ["PT", "PRT"],
        ["Portugal"],
        [],
        [],
        0.5,
        "pt",
        [
            ("Lisbon", "Lisboa", "", "", ""),
            ("Porto", "", "", "", ""),
            ("Braga", "", "", "", ""),
            ("Coimbra", "", "", "", ""),
            ("Faro", "", "", "", "Algarve"),
            ("Funchal", "", "", "", "Madeira"),
            ("Aveiro", "", "", "", ""),
            ("Evora", "Évora", "", "", "Alentejo"),
            ("Setubal", "Setúbal", "", "", ""),
        ],
    ),
    (
        "NZ",
        ["New Zealand", "NZ"],
        ["NZ", "NZL"],
        ["Aotearoa"],
        [],
        [],
        0.04,
        "en",
        [
            ("Auckland", "Tāmaki Makaurau", "", "", ""),
            ("Wellington", "Te Whanganui-a-Tara", "", "", ""),
            ("Christchurch", "Ōtautahi", "", "", "Canterbury"),
            ("Hamilton", "Kirikiriroa", "", "", "Waikato"),
            ("Dunedin", "Ōtepoti", "", "", "Otago"),
            ("Tauranga", "", "", "", ""),
            ("Napier", "", "", "", "Hawke's Bay"),
            ("Nelson", "", "", "", ""),
            ("Queenstown", "", "", "", "Otago"),
        ],
    ),
    (
        "ZA",
        ["South Africa", "RSA"],
        ["ZA", "RSA", "ZAF"],
        ["Suid-Afrika", "Mzansi"],
        [],
        [],
        0.04,
        "en",
        [
            ("Johannesburg", "", "", "", "Gauteng"),
            ("Cape Town", "Kaapstad", "", "", "Western Cape"),
            ("Durban", "eThekwini", "", "", "KwaZulu-Natal"),
            ("Pretoria", "Tshwane", "", "", "Gauteng"),
            ("Port Elizabeth", "Gqeberha", "", "", "Eastern Cape"),
            ("Bloemfontein", "", "", "", "Free State"),
            ("East London", "", "", "", "Eastern Cape"),
            ("Stellenbosch", "", "", "", "Western Cape"),
            ("Polokwane", "", "", "", "Limpopo"),
        ],
    ),
    (
        "AR",
        ["Argentina"],
        ["AR", "ARG"],
        ["Argentina"],
        [],
        [],
        0.5,
        "es",
        [
            ("Buenos Aires", "", "", "", ""),
            ("Cordoba", "Córdoba", "", "", ""),
            ("Rosario", "", "", "", "Santa Fe"),
            ("Mendoza", "", "", "", ""),
            ("La Plata", "", "", "", ""),
            ("Mar del Plata", "", "", "", ""),
            ("Tucuman", "San Miguel de Tucumán", "", "", ""),
            ("Salta", "", "", "", ""),
            ("Bariloche", "San Carlos de Bariloche", "", "", "Río Negro"),
            ("Ushuaia", "", "", "", "Tierra del Fuego"),
        ],
    ),
    (
        "AT",
        ["Austria"],
        ["AT", "AUT"],
        ["Österreich"],
        [],
        [],
        0.55,
        "de",
        [
            ("Vienna", "Wien", "", "", ""),
            ("Graz", "", "", "", "Styria"),
            ("Linz", "", "", "", "Upper Austria"),
            ("Salzburg", "", "", "", ""),
            ("Innsbruck", "", "", "", "Tyrol"),
            ("Klagenfurt", "", "", "", "Carinthia"),
            ("Villach", "", "", "", "Carinthia"),
            ("St. Polten", "St. Pölten", "", "", "Lower Austria"),
        ],
    ),
    (
        "FI",
        ["Finland"],
        ["FI", "FIN"],
        ["Suomi"],
        [],
        [],
        0.5,
        "en",
        [
            ("Helsinki", "", "", "", ""),
            ("Espoo", "", "", "", ""),
            ("Tampere", "", "", "", ""),
            ("Turku", "", "", "", ""),
            ("Oulu", "", "", "", ""),
            ("Jyvaskyla", "Jyväskylä", "", "", ""),
            ("Kuopio", "", "", "", ""),
            ("Rovaniemi", "", "", "", "Lapland"),
        ],
    ),
    (
        "UA",
        ["Ukraine"],
        ["UA", "UKR"],
        ["Ukraina"],
        ["Україна"],
        [],
        0.0,
        "uk",
        [
            ("Kyiv", "", "Київ", "", ""),
            ("Kharkiv", "", "Харків", "", ""),
            ("Lviv", "", "Львів", "", ""),
            ("Odesa", "", "Одеса", "", ""),
            ("Dnipro", "", "Дніпро", "", ""),
            ("Zaporizhzhia", "", "Запоріжжя", "", ""),
            ("Vinnytsia", "", "Вінниця", "", ""),
            ("Chernihiv", "", "Чернігів", "", ""),
        ],
    ),
    (
        "TR",
        ["Turkey", "Türkiye"],
        ["TR", "TUR"],
        ["Türkiye", "Turkiye"],
        [],
        [],
        0.5,
        "tr",
        [
            ("Istanbul", "İstanbul", "", "", ""),
            ("Ankara", "", "", "", ""),
            ("Izmir", "İzmir", "", "", ""),
            ("Bursa", "", "", "", ""),
            ("Antalya", "", "", "", ""),
            ("Adana", "", "", "", ""),
            ("Konya", "", "", "", ""),
            ("Trabzon", "", "", "", ""),
            ("Eskisehir", "Eskişehir", "", "", ""),
        ],
    ),
    (
        "NG",
        ["Nigeria"],
        ["NG", "NGA", "NGR"],
        [],
        [],
        [],
        0.03,
        "en",
        [
            ("Lagos", "Èkó", "", "", "Lagos State"),
            ("Abuja", "", "", "", "FCT"),
            ("Ibadan", "", "", "", "Oyo State"),
            ("Port Harcourt", "", "", "", "Rivers State"),
            ("Kano", "", "", "", "Kano State"),
            ("Benin City", "", "", "", "Edo State"),
            ("Enugu", "", "", "", "Enugu State"),
            ("Kaduna", "", "", "", "Kaduna State"),
            ("Jos", "", "", "", "Plateau State"),
        ],
    ),
    (
        "ID",
        ["Indonesia"],
        ["ID", "IDN", "INA"],
        ["Indonesia"],
        [],
        [],
        0.0,
        "id",
        [
            ("Jakarta", "", "", "", ""),
            ("Surabaya", "", "", "", "East Java"),
            ("Bandung", "", "", "", "West Java"),
            ("Yogyakarta", "", "", "", ""),
            ("Medan", "", "", "", "North Sumatra"),
            ("Semarang", "", "", "", "Central Java"),
            ("Denpasar", "", "", "", "Bali"),
            ("Makassar", "", "", "", ""),
            ("Malang", "", "", "", "East Java"),
            ("Palembang", "", "", "", ""),
        ],
    ),
    (
        "PH",
        ["Philippines"],
        ["PH", "PHL", "PHI"],
        ["Pilipinas"],
        [],
        [],
        0.0,
        "en",
        [
            ("Manila", "", "", "", "Metro Manila"),
            ("Quezon City", "", "", "", "Metro Manila"),
            ("Cebu City", "", "", "", "Cebu"),
            ("Davao City", "", "", "", ""),
            ("Makati", "", "", "", "Metro Manila"),
            ("Baguio", "", "", "", "Benguet"),
            ("Iloilo City", "", "", "", "Iloilo"),
            ("Taguig", "", "", "", "Metro Manila"),
            ("Cagayan de Oro", "", "", "", "Misamis Oriental"),
        ],
    ),
    (
        "CO",
        ["Colombia"],
        ["CO", "COL"],
        ["Colombia"],
        [],
        [],
        0.5,
        "es",
        [
            ("Bogota", "Bogotá", "", "", ""),
            ("Medellin", "Medellín", "", "", "Antioquia"),
            ("Cali", "", "", "", "Valle del Cauca"),
            ("Barranquilla", "", "", "", "Atlántico"),
            ("Cartagena", "", "", "", "Bolívar"),
            ("Bucaramanga", "", "", "", "Santander"),
            ("Pereira", "", "", "", "Risaralda"),
            ("Santa Marta", "", "", "", "Magdalena"),
        ],
    ),
    (
        "CL",
        ["Chile"],
        ["CL", "CHL"],
        ["Chile"],
        [],
        [],
        0.5,
        "es",
        [
            ("Santiago", "", "", "", ""),
            ("Valparaiso", "Valparaíso", "", "", ""),
            ("Concepcion", "Concepción", "", "", ""),
            ("La Serena", "", "", "", ""),
            ("Antofagasta", "", "", "", ""),
            ("Temuco", "", "", "", ""),
            ("Puerto Montt", "", "", "", ""),
            ("Punta Arenas", "", "", "", ""),
        ],
    ),
    (
        "CZ",
        ["Czech Republic", "Czechia"],
        ["CZ", "CZE"],
        ["Česko", "Česká republika"],
        [],
        ["Cesko"],
        0.5,
        "en",
        [
            ("Prague", "Praha", "", "", ""),
            ("Brno", "", "", "", "South Moravia"),
            ("Ostrava", "", "", "", ""),
            ("Plzen", "Plzeň", "", "", ""),
            ("Olomouc", "", "", "", ""),
            ("Liberec", "", "", "", ""),
            ("Ceske Budejovice", "České Budějovice", "", "", ""),
            ("Hradec Kralove", "Hradec Králové", "", "", ""),
        ],
    ),
    (
        "KE",
        ["Kenya"],
        ["KE", "KEN"],
        [],
        [],
        [],
        0.0,
        "en",
        [
            ("Nairobi", "", "", "", ""),
            ("Mombasa", "", "", "", ""),
            ("Kisumu", "", "", "", ""),
            ("Nakuru", "", "", "", ""),
            ("Eldoret", "", "", "", ""),
            ("Nyeri", "", "", "", ""),
            ("Malindi", "", "", "", ""),
        ],
    ),
    (
        "TW",
        ["Taiwan"],
        ["TW", "TWN", "ROC"],
        [],
        ["台灣", "臺灣", "台湾"],
        [],
        0.0,
        "zh",
        [
            ("Taipei", "", "台北|臺北|台北市", "", ""),
            ("Kaohsiung", "", "高雄", "", ""),
            ("Taichung", "", "台中|臺中", "", ""),
            ("Tainan", "", "台南|臺南", "", ""),
            ("Hsinchu", "", "新竹", "", ""),
            ("Taoyuan", "", "桃園", "", ""),
            ("Keelung", "", "基隆", "", ""),
        ],
    ),
    (
        "SG",
        ["Singapore"],
        ["SG", "SGP"],
        ["Singapura"],
        ["新加坡"],
        [],
        0.0,
        "en",
        [
            ("Singapore", "", "新加坡", "", ""),
            ("Jurong", "", "", "", ""),
            ("Tampines", "", "", "", ""),
            ("Woodlands", "", "", "", ""),
            ("Bedok", "", "", "", ""),
            ("Ang Mo Kio", "", "", "", ""),
            ("Punggol", "", "", "", ""),
        ],
    ),
    (
        "TH",
        ["Thailand"],
        ["TH", "THA"],
        ["Prathet Thai"],
        ["ประเทศไทย", "ไทย"],
        ["Mueang Thai"],
        0.0,
        "en",
        [
            ("Bangkok", "Krung Thep", "กรุงเทพฯ|กรุงเทพมหานคร", "", ""),
            ("Chiang Mai", "", "เชียงใหม่", "", ""),
            ("Phuket", "", "ภูเก็ต", "", ""),
            ("Pattaya", "", "พัทยา", "", ""),
            ("Khon Kaen", "", "ขอนแก่น", "", ""),
            ("Hat Yai", "", "หาดใหญ่", "", ""),
            ("Nakhon Ratchasima", "", "นครราชสีมา", "", ""),
            ("Udon Thani", "", "อุดรธานี", "", ""),
        ],
    ),
    (
        "PK",
        ["Pakistan"],
        ["PK", "PAK"],
        [],
        ["پاکستان"],
        [],
        0.0,
        "en",
        [
            ("Karachi", "", "کراچی", "", "Sindh"),
            ("Lahore", "", "لاہور", "", "Punjab"),
            ("Islamabad", "", "اسلام آباد", "", ""),
            ("Rawalpindi", "", "راولپنڈی", "", "Punjab"),
            ("Faisalabad", "", "فیصل آباد", "", "Punjab"),
            ("Peshawar", "", "پشاور", "", "Khyber Pakhtunkhwa"),
            ("Multan", "", "ملتان", "", "Punjab"),
            ("Quetta", "", "کوئٹہ", "", "Balochistan"),
        ],
    ),
    (
        "GR",
        ["Greece"],
        ["GR", "GRC", "GRE"],
        ["Ellada", "Hellas"],
        ["Ελλάδα", "Ελλάς"],
        [],
        0.0,
        "en",
        [
            ("Athens", "Athina", "Αθήνα", "", ""),
            ("Thessaloniki", "", "Θεσσαλονίκη", "", ""),
            ("Patras", "Patra", "Πάτρα", "", ""),
            ("Heraklion", "Irakleio", "Ηράκλειο", "", "Crete"),
            ("Larissa", "", "Λάρισα", "", ""),
            ("Volos", "", "Βόλος", "", ""),
            ("Ioannina", "", "Ιωάννινα", "", ""),
            ("Chania", "", "Χανιά", "", "Crete"),
        ],
    ),
    (
        "RO",
        ["Romania"],
        ["RO", "ROU"],
        ["România"],
        [],
        [],
        0.5,
        "en",
        [
            ("Bucharest", "București", "", "", ""),
            ("Cluj-Napoca", "", "", "", ""),
            ("Timisoara", "Timișoara", "", "", ""),
            ("Iasi", "Iași", "", "", ""),
            ("Constanta", "Constanța", "", "", ""),
            ("Brasov", "Brașov", "", "", ""),
            ("Sibiu", "", "", "", ""),
            ("Oradea", "", "", "", ""),
        ],
    ),
    (
        "IL",
        ["Israel"],
        ["IL", "ISR"],
        ["Yisrael"],
        ["ישראל"],
        [],
        0.0,
        "he",
        [
            ("Tel Aviv", "", "תל אביב|תל אביב-יפו", "", ""),
            ("Jerusalem", "Yerushalayim", "ירושלים", "", ""),
            ("Haifa", "", "חיפה", "", ""),
            ("Beersheba", "Be'er Sheva", "באר שבע", "", ""),
            ("Eilat", "", "אילת", "", ""),
            ("Rishon LeZion", "", "ראשון לציון", "", ""),
            ("Netanya", "", "נתניה", "", ""),
        ],
    ),
    (
        "EG",
        ["Egypt"],
        ["EG", "EGY"],
        ["Misr", "Masr"],
        ["مصر"],
        [],
        0.0,
        "ar",
        [
            ("Cairo", "", "القاهرة", "", ""),
            ("Alexandria", "", "الإسكندرية", "", ""),
            ("Giza", "", "الجيزة", "", ""),
            ("Luxor", "", "الأقصر", "", ""),
            ("Aswan", "", "أسوان", "", ""),
            ("Port Said", "", "بورسعيد", "", ""),
            ("Hurghada", "", "الغردقة", "", ""),
            ("Mansoura", "", "المنصورة", "", ""),
        ],
    ),
    (
        "MY",
        ["Malaysia"],
        ["MY", "MYS", "MAS"],
        ["Malaysia"],
        [],
        [],
        0.0,
        "en",
        [
            ("Kuala Lumpur", "", "吉隆坡", "", ""),
            ("George Town", "", "喬治市", "", "Penang"),
            ("Johor Bahru", "", "新山", "", "Johor"),
            ("Ipoh", "", "怡保", "", "Perak"),
            ("Kuching", "", "", "", "Sarawak"),
            ("Kota Kinabalu", "", "", "", "Sabah"),
            ("Petaling Jaya", "", "", "", "Selangor"),
            ("Shah Alam", "", "", "", "Selangor"),
            ("Malacca", "Melaka", "", "", ""),
        ],
    ),
    (
        "VN",
        ["Vietnam", "Viet Nam"],
        ["VN", "VNM", "VIE"],
        ["Việt Nam"],
        [],
        [],
        0.4,
        "vi",
        [
            ("Ho Chi Minh City", "Thành phố Hồ Chí Minh", "", "", ""),
            ("Hanoi", "Hà Nội", "", "", ""),
            ("Da Nang", "Đà Nẵng", "", "", ""),
            ("Haiphong", "Hải Phòng", "", "", ""),
            ("Hue", "Huế", "", "", ""),
            ("Can Tho", "Cần Thơ", "", "", ""),
            ("Nha Trang", "", "", "", ""),
            ("Da Lat", "Đà Lạt", "", "", ""),
        ],
    ),
    (
        "PE",
        ["Peru"],
        ["PE", "PER"],
        ["Perú"],
        [],
        [],
        0.5,
        "es",
        [
            ("Lima", "", "", "", ""),
            ("Arequipa", "", "", "", ""),
            ("Cusco", "", "", "", ""),
            ("Trujillo", "", "", "", "La Libertad"),
            ("Piura", "", "", "", ""),
            ("Iquitos", "", "", "", "Loreto"),
            ("Chiclayo", "", "", "", ""),
        ],
    ),
    (
        "HU",
        ["Hungary"],
        ["HU", "HUN"],
        ["Magyarország"],
        [],
        [],
        0.5,
        "en",
        [
            ("Budapest", "", "", "", ""),
            ("Debrecen", "", "", "", ""),
            ("Szeged", "", "", "", ""),
            ("Miskolc", "", "", "", ""),
            ("Pecs", "Pécs", "", "", ""),
            ("Gyor", "Győr", "", "", ""),
        ],
    ),
    (
        "HK",
        ["Hong Kong"],
        ["HK", "HKG"],
        [],
        ["香港"],
        [],
        0.0,
        "zh",
        [
            ("Hong Kong", "", "香港", "", ""),
            ("Kowloon", "", "九龍", "", ""),
            ("Sha Tin", "", "沙田", "", ""),
            ("Tsuen Wan", "", "荃灣", "", ""),
            ("Tuen Mun", "", "屯門", "", ""),
            ("Tai Po", "", "大埔", "", ""),
        ],
    ),
    (
        "BD",
        ["Bangladesh"],
        ["BD", "BGD"],
        [],
        ["বাংলাদেশ"],
        [],
        0.0,
        "en",
        [
            ("Dhaka", "", "ঢাকা", "", ""),
            ("Chittagong", "Chattogram", "চট্টগ্রাম", "", ""),
            ("Khulna", "", "খুলনা", "", ""),
            ("Sylhet", "", "সিলেট", "", ""),
            ("Rajshahi", "", "রাজশাহী", "", ""),
        ],
    ),
    (
        "AE",
        ["UAE", "United Arab Emirates"],
        ["AE", "UAE", "ARE"],
        [],
        ["الإمارات"],
        [],
        0.0,
        "ar",
        [
            ("Dubai", "", "دبي", "", ""),
            ("Abu Dhabi", "", "أبوظبي", "", ""),
            ("Sharjah", "", "الشارقة", "", ""),
            ("Al Ain", "", "العين", "", ""),
            ("Ajman", "", "عجمان", "", ""),
            ("Ras Al Khaimah", "", "رأس الخيمة", "", ""),
        ],
    ),
    (
        "SA",
        ["Saudi Arabia", "KSA"],
        ["SA", "KSA", "SAU"],
        [],
        ["السعودية"],
        [],
        0.0,
        "ar",
        [
            ("Riyadh", "", "الرياض", "", ""),
            ("Jeddah", "", "جدة", "", ""),
            ("Mecca", "Makkah", "مكة|مكة المكرمة", "", ""),
            ("Medina", "Madinah", "المدينة المنورة", "", ""),
            ("Dammam", "", "الدمام", "", ""),
            ("Khobar", "Al Khobar", "الخبر", "", ""),
            ("Abha", "", "أبها", "", ""),
        ],
    ),
    (
        "MA",
        ["Morocco"],
        ["MA", "MAR"],
        ["Maroc", "Al Maghrib"],
        ["المغرب"],
        [],
        0.3,
        "fr",
        [
            ("Casablanca", "", "الدار البيضاء", "", ""),
            ("Rabat", "", "الرباط", "", ""),
            ("Marrakesh", "Marrakech", "مراكش", "", ""),
            ("Fez", "Fès", "فاس", "", ""),
            ("Tangier", "Tanger", "طنجة", "", ""),
            ("Agadir", "", "أكادير", "", ""),
        ],
    ),
    (
        "HR",
        ["Croatia"],
        ["HR", "HRV", "CRO"],
        ["Hrvatska"],
        [],
        [],
        0.3,
        "en",
        [
            ("Zagreb", "", "", "", ""),
            ("Split", "", "", "", "Dalmatia"),
            ("Rijeka", "", "", "", ""),
            ("Osijek", "", "", "", ""),
            ("Zadar", "", "", "", "Dalmatia"),
            ("Dubrovnik", "", "", "", "Dalmatia"),
            ("Pula", "", "", "", "Istria"),
        ],
    ),
    (
        "RS",
        ["Serbia"],
        ["RS", "SRB"],
        ["Srbija"],
        ["Србија"],
        [],
        0.3,
        "en",
        [
            ("Belgrade", "Beograd", "Београд", "", ""),
            ("Novi Sad", "", "Нови Сад", "", "Vojvodina"),
            ("Nis", "Niš", "Ниш", "", ""),
            ("Kragujevac", "", "Крагујевац", "", ""),
            ("Subotica", "", "Суботица", "", "Vojvodina"),
        ],
    ),
    (
        "GH",
        ["Ghana"],
        ["GH", "GHA"],
        [],
        [],
        [],
        0.0,
        "en",
        [
            ("Accra", "", "", "", "Greater Accra"),
            ("Kumasi", "", "", "", "Ashanti"),
            ("Tamale", "", "", "", ""),
            ("Takoradi", "Sekondi-Takoradi", "", "", ""),
            ("Cape Coast", "", "", "", ""),
            ("Tema", "", "", "", ""),
        ],
    ),
    (
        "IS",
        ["Iceland"],
        ["IS", "ISL"],
        ["Ísland"],
        [],
        [],
        0.5,
        "en",
        [
            ("Reykjavik", "Reykjavík", "", "", ""),
            ("Akureyri", "", "", "", ""),
            ("Kopavogur", "Kópavogur", "", "", ""),
            ("Hafnarfjordur", "Hafnarfjörður", "", "", ""),
            ("Selfoss", "", "", "", ""),
            ("Isafjordur", "Ísafjörður", "", "", ""),
        ],
    ),
    (
        "EE",
        ["Estonia"],
        ["EE", "EST"],
        ["Eesti"],
        [],
        [],
        0.4,
        "en",
        [
            ("Tallinn", "", "", "", ""),
            ("Tartu", "", "", "", ""),
            ("Parnu", "Pärnu", "", "", ""),
            ("Narva", "", "", "", ""),
            ("Viljandi", "", "", "", ""),
        ],
    ),
]

COUNTRIES: dict[str, Country] = {}
for _spec in _COUNTRY_SPECS:
    _code, _en, _codes, _native, _script, _rare, _lp, _lang, _cities = _spec
    COUNTRIES[_code] = Country(
        _code, _en, _codes, _native, _script, _rare, _lp, _lang, [_c(t) for t in _cities]
    )
assert set(COUNTRIES) == set(COUNTRY_WEIGHTS), set(COUNTRIES) ^ set(COUNTRY_WEIGHTS)

# Nicknames, former names and informal short forms of cities, by (country, English name).
CITY_NICKNAMES: dict[tuple[str, str], list[str]] = {
    ("US", "New York"): ["NYC", "NY", "New York City", "The Big Apple"],
    ("US", "Los Angeles"): ["LA", "L.A."],
    ("US", "Chicago"): ["Chi-town", "the Windy City"],
    ("US", "Houston"): ["H-Town", "HTX"],
    ("US", "Austin"): ["ATX"],
    ("US", "Denver"): ["Mile High City"],
    ("US", "Boston"): ["Beantown"],
    ("US", "San Francisco"): ["SF", "San Fran", "Frisco"],
    ("US", "Philadelphia"): ["Philly"],
    ("US", "Atlanta"): ["ATL"],
    ("US", "Portland"): ["PDX", "Stumptown"],
    ("US", "Minneapolis"): ["Mpls", "Twin Cities"],
    ("US", "Oklahoma City"): ["OKC"],
    ("GB", "London"): ["LDN", "the Big Smoke"],
    ("GB", "Manchester"): ["Manny", "MCR"],
    ("GB", "Birmingham"): ["Brum"],
    ("GB", "Edinburgh"): ["Auld Reekie", "Edinbra"],
    ("DE", "Frankfurt"): ["FFM", "Mainhattan"],
    ("DE", "Berlin"): ["Spree-Athen"],
    ("IN", "Mumbai"): ["Bombay"],
    ("IN", "Delhi"): ["New Delhi", "NCR", "Dilli"],
    ("IN", "Bangalore"): ["Blr", "B'lore"],
    ("IN", "Chennai"): ["Madras"],
    ("IN", "Kolkata"): ["Calcutta"],
    ("IN", "Hyderabad"): ["Hyd"],
    ("IN", "Pune"): ["Poona"],
    ("BR", "Sao Paulo"): ["Sampa", "SP"],
    ("BR", "Rio de Janeiro"): ["Rio"],
    ("BR", "Belo Horizonte"): ["BH", "Beagá"],
    ("BR", "Porto Alegre"): ["POA"],
    ("BR", "Florianopolis"): ["Floripa"],
    ("CA", "Toronto"): ["TO", "T.O.", "the 6ix"],
    ("CA", "Vancouver"): ["Van", "Vancity"],
    ("CA", "Montreal"): ["MTL"],
    ("CA", "Calgary"): ["YYC", "Cowtown"],
    ("CA", "Edmonton"): ["YEG", "E-town"],
    ("CA", "Winnipeg"): ["Winterpeg"],
    ("AU", "Sydney"): ["Syd"],
    ("AU", "Melbourne"): ["Melb", "Melbs"],
    ("AU", "Brisbane"): ["Brissie", "Brisvegas"],
    ("AU", "Adelaide"): ["Radelaide"],
    ("AU", "Gold Coast"): ["Goldy"],
    ("NL", "Amsterdam"): ["A'dam", "Mokum"],
    ("NL", "Rotterdam"): ["R'dam"],
    ("ES", "Barcelona"): ["BCN", "Barna"],
    ("MX", "Mexico City"): ["CDMX", "DF", "Chilangolandia"],
    ("MX", "Guadalajara"): ["GDL"],
    ("MX", "Monterrey"): ["MTY"],
    ("CN", "Beijing"): ["Peking"],
    ("CN", "Guangzhou"): ["Canton"],
    ("KR", "Busan"): ["Pusan"],
    ("RU", "Saint Petersburg"): ["St. Pete", "Piter", "SPb", "St Petersburg"],
    ("RU", "Moscow"): ["Msk"],
    ("UA", "Kyiv"): ["Kiev"],
    ("UA", "Odesa"): ["Odessa"],
    ("UA", "Kharkiv"): ["Kharkov"],
    ("UA", "Lviv"): ["Lvov", "Lemberg"],
    ("DK", "Copenhagen"): ["CPH"],
    ("CH", "Zurich"): ["Züri"],
    ("PT", "Porto"): ["Oporto"],
    ("NZ", "Wellington"): ["Welly", "Wellywood"],
    ("NZ", "Christchurch"): ["Chch"],
    ("NZ", "Auckland"): ["Akl"],
    ("ZA", "Johannesburg"): ["Joburg", "Jozi", "JHB"],
    ("ZA", "Cape Town"): ["CPT", "the Mother City"],
    ("ZA", "Port Elizabeth"): ["PE", "the Windy City"],
    ("AR", "Buenos Aires"): ["BA", "Bs As", "CABA", "Baires"],
    ("NG", "Lagos"): ["Lasgidi", "Eko"],
    ("NG", "Port Harcourt"): ["PH", "Garden City"],
    ("KE", "Nairobi"): ["Nai"],
    ("MY", "Kuala Lumpur"): ["KL"],
    ("MY", "Johor Bahru"): ["JB"],
    ("MY", "Petaling Jaya"): ["PJ"],
    ("MY", "George Town"): ["Penang"],
    ("MY", "Kota Kinabalu"): ["KK"],
    ("SG", "Singapore"): ["SG", "S'pore", "the Lion City"],
    ("HK", "Hong Kong"): ["HK", "HKG"],
    ("TH", "Bangkok"): ["BKK"],
    ("TH", "Nakhon Ratchasima"): ["Korat"],
    ("VN", "Ho Chi Minh City"): ["Saigon", "HCMC", "Sài Gòn"],
    ("ID", "Yogyakarta"): ["Jogja", "Yogya"],
    ("ID", "Denpasar"): ["Bali"],
    ("ID", "Jakarta"): ["Jkt"],
    ("PH", "Quezon City"): ["QC"],
    ("PH", "Cagayan de Oro"): ["CDO"],
    ("PH", "Manila"): ["MNL", "Metro Manila"],
    ("PK", "Karachi"): ["Khi"],
    ("PK", "Islamabad"): ["Isb"],
    ("PK", "Lahore"): ["LHR"],
    ("BD", "Dhaka"): ["Dacca"],
    ("BD", "Chittagong"): ["Ctg"],
    ("IE", "Dublin"): ["Dub", "the Big Smoke"],
    ("IL", "Tel Aviv"): ["TLV"],
    ("AE", "Dubai"): ["DXB"],
    ("GR", "Thessaloniki"): ["Salonica"],
    ("CZ", "Plzen"): ["Pilsen"],
    ("CO", "Medellin"): ["Medallo"],
    ("FR", "Paris"): ["Paname", "la Ville Lumière"],
    ("BE", "Brussels"): ["BXL", "Bxl"],
    ("ES", "Madrid"): ["Madriz"],
    ("SE", "Stockholm"): ["Sthlm"],
    ("SE", "Gothenburg"): ["Gbg"],
    ("PL", "Warsaw"): ["Wawa"],
    ("FI", "Helsinki"): ["Stadi", "Hki"],
    ("IT", "Rome"): ["the Eternal City"],
    ("IT", "Venice"): ["La Serenissima"],
    ("TR", "Istanbul"): ["Constantinople"],
    ("CL", "Santiago"): ["Stgo"],
    ("HU", "Budapest"): ["Bp."],
    ("JP", "Tokyo"): ["TYO", "Edo"],
    ("PE", "Cusco"): ["Cuzco"],
}
COUNTRY_NICKNAMES: dict[str, list[str]] = {
    "US": ["the States", "Stateside", "'Murica"],
    "GB": ["Blighty", "Old Blighty"],
    "AU": ["Oz", "Down Under", "Straya"],
    "NZ": ["Kiwiland", "Godzone"],
    "NL": ["Holland"],
    "CA": ["the Great White North"],
    "ZA": ["Mzansi"],
    "IE": ["the Emerald Isle"],
    "JP": ["Land of the Rising Sun"],
    "PH": ["Pinas"],
    "CH": ["Helvetia"],
}

# Continents and regions: (weight, spellings, member countries).
_EUROPE = "GB IE DE FR NL BE ES PT IT CH AT SE NO DK FI IS PL CZ HU RO GR HR RS EE UA RU"
_EU = "DE FR NL BE ES PT IT AT SE DK FI PL CZ HU RO GR HR EE IE"
_ASIA = "JP CN KR TW HK SG MY ID PH TH VN IN PK BD"
_AFRICA = "NG KE ZA EG MA GH"
_MIDEAST = "IL AE SA EG TR"
REGION_GROUPS: list[tuple[float, list[str], str]] = [
    (5, ["Europe", "europe", "EUROPE", "🇪🇺"], _EUROPE),
    (2, ["EU", "European Union"], _EU),
    (1, ["Western Europe"], "GB IE DE FR NL BE CH AT"),
    (1, ["Central Europe", "Mitteleuropa"], "DE AT CH CZ PL HU"),
    (1, ["Eastern Europe"], "PL CZ HU RO UA RU"),
    (1, ["Southern Europe"], "ES PT IT GR HR"),
    (4, ["Scandinavia", "scandinavia"], "SE NO DK"),
    (2, ["Nordics", "the Nordics", "Norden"], "SE NO DK FI IS"),
    (3, ["Benelux"], "NL BE"),
    (2, ["Iberia", "Iberian Peninsula"], "ES PT"),
    (2, ["the Balkans", "Balkans"], "HR RS GR RO"),
    (3, ["the Baltics", "Baltics"], "EE"),
    (1, ["British Isles"], "GB IE"),
    (1, ["Mediterranean"], "ES IT GR TR HR"),
    (4, ["North America"], "US CA MX"),
    (2, ["Latin America", "LATAM", "Latinoamérica"], "MX BR AR CL CO PE"),
    (2, ["South America", "Sudamérica", "América do Sul"], "BR AR CL CO PE"),
    (4, ["Asia", "asia"], _ASIA),
    (2, ["East Asia"], "JP CN KR TW HK"),
    (3, ["Southeast Asia", "SEA", "SE Asia"], "SG MY ID PH TH VN"),
    (2, ["South Asia", "Indian subcontinent"], "IN PK BD"),
    (3, ["Middle East"], _MIDEAST),
    (1, ["MENA"], "EG MA AE SA"),
    (2, ["GCC", "the Gulf"], "AE SA"),
    (4, ["Africa"], _AFRICA),
    (2, ["West Africa"], "NG GH"),
    (2, ["East Africa"], "KE"),
    (2, ["Southern Africa"], "ZA"),
    (1, ["North Africa"], "EG MA"),
    (3, ["Oceania", "Australasia", "ANZ"], "AU NZ"),
    (1, ["APAC"], _ASIA + " AU NZ"),
    (1, ["EMEA"], _EUROPE + " " + _AFRICA + " " + _MIDEAST),
    (1, ["Northern Hemisphere"], _EUROPE + " US CA JP CN KR"),
    (1, ["Southern Hemisphere"], "AU NZ ZA AR CL"),
]
SUBREGIONS: dict[str, list[str]] = {
    "US": [
        "Pacific Northwest",
        "PNW",
        "New England",
        "Midwest",
        "the Midwest",
        "Bay Area",
        "Tornado Alley",
        "East Coast",
        "West Coast",
        "SoCal",
        "the South",
    ],
    "GB": [
        "the Midlands",
        "Scottish Highlands",
        "Lake District",
        "West Country",
        "Home Counties",
        "Yorkshire",
        "Cornwall",
    ],
    "DE": ["Ruhrgebiet", "Black Forest", "Schwarzwald", "Allgäu"],
    "FR": ["Provence", "Côte d'Azur", "Bretagne", "Alsace"],
    "IT": ["Tuscany", "Toscana", "Sicilia", "Dolomites"],
    "ES": ["Andalucía", "Costa del Sol", "Canarias", "Catalunya"],
    "CA": ["GTA", "the Prairies", "Maritimes", "Lower Mainland"],
    "AU": ["the Outback", "Top End", "Sunshine Coast"],
    "NL": ["Randstad", "Veluwe"],
    "NZ": ["South Island", "North Island"],
    "JP": ["Kanto", "Kansai", "Hokkaido", "Okinawa"],
    "CH": ["Romandie", "Ticino"],
    "AT": ["Tirol", "Tyrol"],
    "NO": ["Lofoten"],
    "SE": ["Lapland", "Norrland", "Skåne"],
    "FI": ["Lapland", "Lappi"],
    "IN": ["NCR", "Kerala", "Goa"],
    "BR": ["Nordeste", "Sertão"],
    "AR": ["Patagonia"],
    "CL": ["Patagonia", "Atacama"],
    "ZA": ["Western Cape", "Karoo"],
    "ID": ["Bali", "Java"],
    "PH": ["Luzon", "Mindanao"],
    "IE": ["Connemara", "Wild Atlantic Way"],
    "MX": ["Yucatán", "Baja"],
}

# Junk / placeholder values (not resolvable to a country).
JUNK: list[str] = [
    "n/a",
    "N/A",
    "-",
    "none",
    "None",
    "NA",
    ".",
    "?",
    "--",
    "localhost",
    "Earth",
    "Planet Earth",
    "somewhere",
    "the internet",
    "Internet",
    "Middle-earth",
    "🏠",
    "🌍",
    "🌎",
    "home",
    "Home",
    "my backyard",
    "backyard",
    "here",
    "everywhere",
    "worldwide",
    "Global",
    "null",
    "NULL",
    "undefined",
    "TBD",
    "xxx",
    "asdf",
    "private",
    "prefer not to say",
    "secret",
    "[redacted]",
    "see profile",
    "0",
    "123",
    "test",
    "127.0.0.1",
    "Mars",
    "the Moon",
    "Narnia",
    "Hogwarts",
    "cloud 9",
    "in the clouds",
    "under the weather",
    "eye of the storm",
    "where the wind blows",
    "on the road",
    "at sea",
    "🌦️",
    "⛈️",
    "☁️",
    "🌈",
    "¯\\_(ツ)_/¯",
    "...",
    "Remote",
    "Third rock from the sun",
]

# Noisy phrase templates; "{c}" is the place.  English ones are used everywhere,
# the local-language ones only for members of countries with that language.
NOISE_EN: list[str] = [
    "based in {c}",
    "Based in {c}",
    "currently in {c}",
    "Currently in {c}",
    "near {c}",
    "Near {c}",
    "{c} area",
    "Greater {c} area",
    "{c} metro area",
    "just outside {c}",
    "outskirts of {c}",
    "{c} suburbs",
    "{c}-ish",
    "{c} (ish)",
    "somewhere near {c}",
    "📍{c}",
    "📍 {c}",
    "home: {c}",
    "Station: {c}",
    "rooftop station in {c}",
    "backyard in {c}",
    "{c}, roughly",
    "around {c}",
    "close to {c}",
    "north of {c}",
    "south of {c}",
    "~{c}",
    "{c} :)",
    "{c}!!",
    "live in {c}",
    "living in {c}",
    "from {c}",
    "I'm in {c}",
    "{c} (rural)",
]
NOISE_LOCAL: dict[str, list[str]] = {
    "es": [
        "vivo en {c}",
        "cerca de {c}",
        "desde {c}",
        "zona de {c}",
        "afueras de {c}",
        "{c} y alrededores",
    ],
    "pt": [
        "moro em {c}",
        "perto de {c}",
        "região de {c}",
        "Grande {c}",
        "direto de {c}",
        "interior de {c}",
    ],
    "de": ["wohne in {c}", "bei {c}", "in der Nähe von {c}", "Raum {c}", "Großraum {c}", "aus {c}"],
    "fr": ["près de {c}", "j'habite à {c}", "région de {c}", "banlieue de {c}", "à côté de {c}"],
    "it": ["vicino a {c}", "abito a {c}", "zona {c}", "provincia di {c}"],
    "nl": ["in de buurt van {c}", "regio {c}", "woon in {c}", "omgeving {c}"],
    "sv": ["bor i {c}", "nära {c}"],
    "da": ["bor i {c}", "nær {c}"],
    "no": ["bor i {c}", "nær {c}"],
    "tr": ["{c} civarı", "{c} / Türkiye"],
    "id": ["tinggal di {c}", "dekat {c}", "daerah {c}"],
    "vi": ["sống ở {c}", "gần {c}"],
    # script languages: the place is written in native script
    "ja": ["{c}在住", "{c}の近く", "{c}近郊"],
    "zh": ["住在{c}", "{c}附近"],
    "ko": ["{c} 거주", "{c} 근처"],
    "ru": ["г. {c}", "{c} и область"],
    "uk": ["м. {c}"],
    "ar": ["أعيش في {c}"],
    "he": ["גר ב{c}"],
}
SCRIPT_LANGS = {"ja", "zh", "ko", "ru", "uk", "ar", "he"}

TWO_PLACE_TEMPLATES: list[tuple[float, str]] = [
    (4, "{a} / {b}"),
    (3, "{a} | {b}"),
    (2, "{a} & {b}"),
    (2, "{a} and {b}"),
    (1, "{a}/{b}"),
    (1, "{a} ↔ {b}"),
    (1, "between {a} and {b}"),
    (1, "{a} (from {b})"),
    (1, "{a}, previously {b}"),
    (1, "{a} -> {b}"),
    (1, "{a} + {b}"),
]

# Sub-national flags (tag sequences) for the UK nations that have one in Unicode.
_TAG_FLAGS = {
    "England": "\U0001f3f4\U000e0067\U000e0062\U000e0065\U000e006e\U000e0067\U000e007f",
    "Scotland": "\U0001f3f4\U000e0067\U000e0062\U000e0073\U000e0063\U000e0074\U000e007f",
    "Wales": "\U0001f3f4\U000e0067\U000e0062\U000e0077\U000e006c\U000e0073\U000e007f",
}


def flag(code: str) -> str:
    """Regional-indicator flag emoji for an ISO 3166-1 alpha-2 code."""
    return "".join(chr(0x1F1E6 + ord(ch) - ord("A")) for ch in code.upper())


# --------------------------------------------------------------------------
# Postcode / address-like strings (only for cities with known postcode ranges).
# --------------------------------------------------------------------------
_PC_RANGES: dict[str, dict[str, tuple[int, int]]] = {
    "US": {
        "New York": (10001, 10040),
        "Los Angeles": (90001, 90089),
        "Chicago": (60601, 60661),
        "Houston": (77002, 77099),
        "Austin": (78701, 78759),
        "Seattle": (98101, 98199),
        "Denver": (80202, 80239),
        "Boston": (2108, 2137),
        "San Francisco": (94102, 94134),
        "Philadelphia": (19102, 19154),
        "Miami": (33125, 33199),
        "Atlanta": (30303, 30350),
        "Portland": (97201, 97239),
        "Minneapolis": (55401, 55488),
        "Oklahoma City": (73102, 73179),
    },
    "DE": {
        "Berlin": (10115, 14199),
        "Munich": (80331, 81929),
        "Hamburg": (20095, 22769),
        "Cologne": (50667, 51149),
        "Frankfurt": (60306, 60599),
        "Stuttgart": (70173, 70629),
        "Dusseldorf": (40210, 40629),
        "Leipzig": (4103, 4357),
        "Dresden": (1067, 1328),
        "Nuremberg": (90402, 90491),
        "Hanover": (30159, 30669),
        "Bremen": (28195, 28779),
    },
    "ES": {
        "Madrid": (28001, 28055),
        "Barcelona": (8001, 8042),
        "Valencia": (46001, 46026),
        "Seville": (41001, 41020),
        "Zaragoza": (50001, 50021),
    },
    "IT": {
        "Rome": (118, 199),
        "Milan": (20121, 20162),
        "Naples": (80121, 80147),
        "Turin": (10121, 10156),
        "Bologna": (40121, 40141),
    },
    "AU": {
        "Sydney": (2000, 2050),
        "Melbourne": (3000, 3207),
        "Brisbane": (4000, 4179),
        "Perth": (6000, 6199),
        "Adelaide": (5000, 5199),
        "Canberra": (2600, 2620),
        "Hobart": (7000, 7019),
        "Darwin": (800, 832),
    },
    "IN": {
        "Mumbai": (400001, 400104),
        "Delhi": (110001, 110096),
        "Bangalore": (560001, 560103),
        "Chennai": (600001, 600119),
        "Kolkata": (700001, 700160),
        "Hyderabad": (500001, 500100),
        "Pune": (411001, 411062),
    },
    "NL": {
        "Amsterdam": (1011, 1109),
        "Rotterdam": (3011, 3089),
        "The Hague": (2491, 2597),
        "Utrecht": (3511, 3585),
        "Eindhoven": (5611, 5658),
        "Groningen": (9711, 9747),
    },
    "CH": {
        "Zurich": (8001, 8057),
        "Geneva": (1201, 1209),
        "Basel": (4051, 4059),
        "Bern": (3004, 3027),
    },
    "DK": {"Copenhagen": (1050, 2450), "Aarhus": (8000, 8270), "Odense": (5000, 5270)},
    "NO": {"Oslo": (150, 1295), "Bergen": (5003, 5099)},
    "BR": {
        "Sao Paulo": (1000, 5999),
        "Rio de Janeiro": (20000, 23799),
        "Belo Horizonte": (30000, 31999),
        "Brasilia": (70000, 72799),
        "Curitiba": (80000, 82999),
        "Porto Alegre": (90000, 91999),
    },
    "PL": {"Warsaw": (0, 4999), "Krakow": (30001, 31999)},
}
_FR_PC = {
    "Paris": [f"750{i:02d}" for i in range(1, 21)],
    "Lyon": [f"6900{i}" for i in range(1, 10)],
    "Marseille": [f"130{i:02d}" for i in range(1, 17)],
    "Toulouse": ["31000", "31100", "31200", "31300", "31400", "31500"],
    "Nice": ["06000", "06100", "06200", "06300"],
    "Nantes": ["44000", "44100", "44200", "44300"],
    "Bordeaux": ["33000", "33100", "33200", "33300", "33800"],
    "Strasbourg": ["67000", "67100", "67200"],
    "Lille": ["59000", "59160", "59260", "59800"],
}
_GB_PC = {
    "London": ["SW1A", "E1", "N1", "SE1", "NW1", "W1", "EC1", "WC2", "SW11", "E14"],
    "Manchester": ["M1", "M4", "M14", "M20"],
    "Birmingham": ["B1", "B5", "B15"],
    "Edinburgh": ["EH1", "EH3", "EH9"],
    "Glasgow": ["G1", "G3", "G12"],
    "Bristol": ["BS1", "BS6", "BS8"],
    "Leeds": ["LS1", "LS6"],
    "Cardiff": ["CF10", "CF24"],
    "Liverpool": ["L1", "L8", "L17"],
    "Newcastle": ["NE1", "NE6"],
    "Belfast": ["BT1", "BT7", "BT9"],
    "Sheffield": ["S1", "S10"],
    "Nottingham": ["NG1", "NG7"],
    "Brighton": ["BN1", "BN2"],
    "Aberdeen": ["AB10", "AB24"],
}
_CA_FSA = {
    "Toronto": ["M5V", "M4C", "M6H", "M5A"],
    "Vancouver": ["V6B", "V5K", "V6K"],
    "Montreal": ["H2X", "H3A", "H2T"],
    "Calgary": ["T2P", "T3E"],
    "Ottawa": ["K1P", "K2P"],
    "Edmonton": ["T5J", "T6E"],
    "Winnipeg": ["R3C", "R3T"],
    "Halifax": ["B3H", "B3J"],
}
_JP_PC = {
    "Tokyo": (100, 179),
    "Osaka": (530, 559),
    "Kyoto": (600, 616),
    "Yokohama": (220, 247),
    "Nagoya": (450, 468),
    "Sapporo": (60, 65),
}
_IT_PROV = {"Rome": "RM", "Milan": "MI", "Naples": "NA", "Turin": "TO", "Bologna": "BO"}
_STREETS = {
    "US": ["Main St", "Oak Ave", "Maple St", "Elm St", "2nd St", "Park Ave", "Cedar Ln"],
    "DE": ["Hauptstraße", "Bahnhofstr.", "Gartenweg", "Schulstraße", "Lindenallee"],
    "FR": ["rue de la République", "avenue Jean Jaurès", "rue Victor Hugo", "rue de la Gare"],
    "NL": ["Kerkstraat", "Dorpsstraat", "Molenweg"],
}
_GB_INWARD_LETTERS = "ABDEFGHJLNPQRSTUWXYZ"


def postcode_string(rng: random.Random, cc: str, city: City, ctry: Country) -> str | None:
    """An address-like location for (cc, city), or None if we have no format for it."""
    name = city.local if (city.local and rng.random() < max(ctry.local_p, 0.6)) else city.en
    r = rng.random()
    if cc == "US" and city.en in _PC_RANGES["US"]:
        z = f"{rng.randint(*_PC_RANGES['US'][city.en]):05d}"
        if r < 0.5:
            return f"{city.en}, {city.abbr} {z}"
        if r < 0.8:
            street = rng.choice(_STREETS["US"])
            return f"{rng.randint(10, 9999)} {street}, {city.en}, {city.abbr} {z}"
        return f"{city.abbr} {z}"
    if cc == "DE" and city.en in _PC_RANGES["DE"]:
        pc = f"{rng.randint(*_PC_RANGES['DE'][city.en]):05d}"
        if r < 0.6:
            return f"{pc} {name}"
        if r < 0.8:
            return f"D-{pc} {name}"
        return f"{rng.choice(_STREETS['DE'])} {rng.randint(1, 120)}, {pc} {name}"
    if cc == "FR" and city.en in _FR_PC:
        pc = rng.choice(_FR_PC[city.en])
        if r < 0.5:
            return f"{pc} {city.en}"
        if r < 0.75:
            return f"{pc} {city.en.upper()}"
        if r < 0.85 and city.en == "Paris":
            n = int(pc[-2:])
            return f"Paris {n}{'er' if n == 1 else 'e'}"
        return f"{rng.randint(1, 80)} {rng.choice(_STREETS['FR'])}, {pc} {city.en}"
    if cc == "GB" and city.en in _GB_PC:
        out = rng.choice(_GB_PC[city.en])
        inward = f"{rng.randint(0, 9)}" + "".join(rng.choice(_GB_INWARD_LETTERS) for _ in "ab")
        if r < 0.5:
            return f"{city.en} {out} {inward}"
        if r < 0.75:
            return f"{out} {inward}"
        return f"{city.en}, {out}"
    if cc == "CA" and city.en in _CA_FSA:
        ldu = f"{rng.randint(0, 9)}{rng.choice('ABCEGHJKLMNPRSTVWXYZ')}{rng.randint(0, 9)}"
        return f"{city.en}, {city.abbr} {rng.choice(_CA_FSA[city.en])} {ldu}"
    if cc == "AU" and city.en in _PC_RANGES["AU"]:
        pc = f"{rng.randint(*_PC_RANGES['AU'][city.en]):04d}"
        return f"{city.en} {city.abbr} {pc}" if r < 0.7 else f"{city.en}, {city.abbr} {pc}"
    if cc == "IN" and city.en in _PC_RANGES["IN"]:
        pin = rng.randint(*_PC_RANGES["IN"][city.en])
        return f"{city.en} - {pin}" if r < 0.6 else f"{city.en} {pin}, {city.region}"
    if cc == "NL" and city.en in _PC_RANGES["NL"]:
        letters = rng.choice("ABCEGHJKLMNPRTVWXZ") + rng.choice("ABCEGHJKLMNPRTVWXZ")
        pc = rng.randint(*_PC_RANGES["NL"][city.en])
        if r < 0.8:
            return f"{pc} {letters} {name}"
        return f"{rng.choice(_STREETS['NL'])} {rng.randint(1, 99)}, {pc}{letters} {name}"
    if cc == "JP" and city.en in _JP_PC:
        pc = f"{rng.randint(*_JP_PC[city.en]):03d}-{rng.randint(1, 99):04d}"
        return f"〒{pc} {city.script[0]}" if r < 0.6 else f"{pc} {city.en}"
    if cc == "BR" and city.en in _PC_RANGES["BR"]:
        cep = f"{rng.randint(*_PC_RANGES['BR'][city.en]):05d}-{rng.randint(0, 999):03d}"
        return f"CEP {cep}, {name} - {city.abbr}" if r < 0.5 else f"{name}/{city.abbr} {cep}"
    if cc == "IT" and city.en in _PC_RANGES["IT"]:
        pc = f"{rng.randint(*_PC_RANGES['IT'][city.en]):05d}"
        return f"{pc} {name} ({_IT_PROV[city.en]})" if r < 0.5 else f"{pc} {name}"
    if cc in ("ES", "CH", "DK", "NO") and city.en in _PC_RANGES[cc]:
        lo, hi = _PC_RANGES[cc][city.en]
        pc = rng.randint(lo, hi)
        width = 5 if cc == "ES" else 4
        prefix = {"CH": "CH-", "DK": "DK-"}.get(cc, "") if r < 0.4 else ""
        return f"{prefix}{pc:0{width}d} {name}"
    if cc == "PL" and city.en in _PC_RANGES["PL"]:
        pc = f"{rng.randint(*_PC_RANGES['PL'][city.en]):05d}"
        return f"{pc[:2]}-{pc[2:]} {name}"
    if cc == "SE" and city.en in ("Stockholm", "Gothenburg", "Malmo"):
        first = {"Stockholm": (111, 118), "Gothenburg": (411, 418), "Malmo": (211, 218)}[city.en]
        return f"{rng.randint(*first)} {rng.randint(10, 69):02d} {name}"
    if cc == "AT" and city.en == "Vienna":
        return f"{rng.choice(['', 'A-'])}{1000 + 10 * rng.randint(1, 23)} Wien"
    if cc == "IE" and city.en == "Dublin":
        d = rng.choice(["1", "2", "4", "6", "6W", "7", "8", "12", "15", "24"])
        if r < 0.7:
            return f"Dublin {d}"
        key = "D6W" if d == "6W" else f"D{int(d):02d}"
        tail = "".join(rng.choice("ACDEFHKNPRTVWXY0123456789") for _ in range(4))
        return f"{key} {tail}, Dublin"
    return None


# --------------------------------------------------------------------------
# Text helpers.
# --------------------------------------------------------------------------
def typo(rng: random.Random, s: str) -> str:
    """One character dropped, doubled, or swapped with its neighbour."""
    letters = [i for i, ch in enumerate(s) if ch.isalpha()]
    if len(letters) < 3:
        return s + s[-1:]
    for _ in range(20):
        op = rng.choices(["drop", "double", "swap"], weights=[4, 3, 3])[0]
        i = rng.choice(letters[1:])  # people rarely mistype the first letter
        if op == "drop":
            out = s[:i] + s[i + 1 :]
        elif op == "double":
            out = s[:i] + s[i] + s[i:]
        else:
            j = i + 1
            if j >= len(s) or not s[j].isalpha() or s[i] == s[j]:
                continue
            out = s[:i] + s[j] + s[i] + s[j + 1 :]
        if out != s:
            return out
    return s[: letters[-1]] + s[letters[-1] + 1 :]


def case_spacing(rng: random.Random, s: str) -> str:
    """Case and whitespace variants of a string ("  new york ", "LONDON", "london,uk")."""
    for _ in range(10):
        out = s
        case = rng.choices(["lower", "upper", "capfirst", "keep"], weights=[5, 3, 1, 2])[0]
        if case == "lower":
            out = out.lower()
        elif case == "upper":
            out = out.upper()
        elif case == "capfirst":
            out = out[:1].upper() + out[1:].lower()
        space = rng.choices(
            ["pad", "lead", "trail", "double", "comma", "nbsp", "dot", "none"],
            weights=[3, 1, 3, 2, 3, 1, 1, 3],
        )[0]
        if space == "pad":
            out = " " * rng.randint(1, 3) + out + " " * rng.randint(1, 2)
        elif space == "lead":
            out = " " + out
        elif space == "trail":
            out = out + " " * rng.randint(1, 3)
        elif space == "double" and " " in out:
            out = out.replace(" ", "  ", 1)
        elif space == "comma" and ", " in out:
            out = out.replace(", ", rng.choice([",", " , ", " ,"]))
        elif space == "nbsp" and " " in out:
            out = out.replace(" ", "\u00a0")
        elif space == "dot":
            out = out + "."
        if out != s:
            return out
    return s.lower() + " "


def zipf_weights(n: int, s: float = 1.2) -> list[float]:
    return [1.0 / (r + 1) ** s for r in range(n)]


# --------------------------------------------------------------------------
# The generator.
# --------------------------------------------------------------------------
class Generator:
    def __init__(self, seed: int):
        self.rng = random.Random(seed)
        self.country_codes = list(COUNTRY_WEIGHTS)
        self.country_w = [COUNTRY_WEIGHTS[c] for c in self.country_codes]
        self.city_w = {cc: zipf_weights(len(c.cities)) for cc, c in COUNTRIES.items()}
        self.styles = list(STYLE_WEIGHTS)
        self.style_w = [STYLE_WEIGHTS[s] for s in self.styles]
        self.kind_w = {}
        for cc in self.country_codes:
            tilt = KIND_TILT.get(cc, {})
            self.kind_w[cc] = [KIND_BASE[k] * tilt.get(k, 1.0) for k in KINDS]
        self.group_by_country: dict[str, list[tuple[float, list[str]]]] = {}
        for w, names, members in REGION_GROUPS:
            for cc in members.split():
                self.group_by_country.setdefault(cc, []).append((w, names))

    # -- small pickers ---------------------------------------------------
    def pick(self, seq: list, weights: list[float] | None = None):
        if weights is None:
            return seq[self.rng.randrange(len(seq))]
        return self.rng.choices(seq, weights=weights)[0]

    def zipf_pick(self, seq: list):
        return self.pick(seq, zipf_weights(len(seq), 1.0))

    def country(self) -> str:
        return self.pick(self.country_codes, self.country_w)

    def city(self, cc: str, exclude: City | None = None) -> City:
        while True:
            c = self.pick(COUNTRIES[cc].cities, self.city_w[cc])
            if c is not exclude:
                return c

    def city_name(self, ctry: Country, city: City) -> tuple[str, bool]:
        """Name the member uses for the city in Latin script; second value: local form used."""
        if city.local and self.rng.random() < ctry.local_p:
            return city.local, True
        return city.en, False

    def country_name(self, ctry: Country, city: City | None, local: bool) -> str:
        """Country as written after a city: English name, code, or native name."""
        rng = self.rng
        if ctry.code == "GB" and city is not None and city.region and rng.random() < 0.4:
            return city.region  # "Edinburgh, Scotland"
        if ctry.native and rng.random() < (0.6 if local else 0.1):
            return self.zipf_pick(ctry.native)
        if rng.random() < 0.25:
            return self.zipf_pick(ctry.codes)
        return self.zipf_pick(ctry.en)

    # -- styles ------------------------------------------------------------
    def s_city_country(self, ctry: Country, city: City) -> str:
        name, local = self.city_name(ctry, city)
        sep = self.pick([", ", " - ", " ", ","], [12, 1, 1, 1])
        return f"{name}{sep}{self.country_name(ctry, city, local)}"

    def s_bare_city(self, ctry: Country, city: City) -> str:
        return self.city_name(ctry, city)[0]

    def s_city_state(self, ctry: Country, city: City) -> str:
        rng = self.rng
        name, local = self.city_name(ctry, city)
        if city.abbr:
            r = rng.random()
            if r < 0.15:
                return f"{name}, {city.abbr}, {self.country_name(ctry, city, local)}"
            if r < 0.40 and city.region and city.region != name:
                return f"{name}, {city.region}"
            if ctry.code == "BR" and r < 0.55:
                return f"{name} - {city.abbr}" if r < 0.5 else f"{name}/{city.abbr}"
            sep = self.pick([", ", " ", ","], [6, 3, 1])
            return f"{name}{sep}{city.abbr}"
        if city.region and city.region != name:
            if rng.random() < 0.2:
                return f"{name}, {city.region}, {self.country_name(ctry, city, local)}"
            return f"{name}, {city.region}"
        return self.s_city_country(ctry, city)

    def s_country_only(self, ctry: Country, city: City) -> str:
        rng = self.rng
        if ctry.code == "GB" and city.region and rng.random() < 0.35:
            return city.region  # "Scotland", "England", "Wales"
        options: list[tuple[float, list[str]]] = [(60, ctry.en), (12, ctry.codes)]
        if ctry.native and ctry.native != ctry.en:
            options.append((25, ctry.native))
        if ctry.script:
            options.append((12, ctry.script))
        if ctry.rare:
            options.append((2, ctry.rare))
        names = self.pick([o[1] for o in options], [o[0] for o in options])
        return self.zipf_pick(names)

    def s_native(self, ctry: Country, city: City) -> str:
        rng = self.rng
        if city.script:
            if city.local and rng.random() < 0.2:
                return city.local
            return self.zipf_pick(city.script)
        if city.local:
            if rng.random() < 0.25 and ctry.native:
                return f"{city.local}, {self.zipf_pick(ctry.native)}"
            return city.local
        if ctry.script and rng.random() < 0.7:
            return self.zipf_pick(ctry.script)
        if ctry.native and ctry.native != ctry.en and rng.random() < 0.5:
            return self.zipf_pick(ctry.native)
        return city.en

    def s_case_spacing(self, ctry: Country, city: City) -> str:
        base = self.s_city_country(ctry, city) if self.rng.random() < 0.45 else city.en
        return case_spacing(self.rng, base)

    def s_typo(self, ctry: Country, city: City) -> str:
        name, local = self.city_name(ctry, city)
        wrong = typo(self.rng, name)
        if self.rng.random() < 0.35:
            return f"{wrong}, {self.country_name(ctry, city, local)}"
        return wrong

    def s_noisy_phrase(self, ctry: Country, city: City) -> str:
        rng = self.rng
        templates = NOISE_LOCAL.get(ctry.lang)
        if templates and rng.random() < 0.5:
            if ctry.lang in SCRIPT_LANGS:
                place = city.script[0] if city.script else city.en
            else:
                place = city.local or city.en
            return self.pick(templates).format(c=place)
        return self.pick(NOISE_EN).format(c=city.en)

    def s_flag(self, ctry: Country, city: City) -> str:
        rng = self.rng
        f = flag(ctry.code)
        if ctry.code == "GB" and city.region in _TAG_FLAGS and rng.random() < 0.3:
            f = _TAG_FLAGS[city.region]
        name = self.city_name(ctry, city)[0]
        form = self.pick(["alone", "after", "before", "full", "double"], [40, 30, 15, 10, 5])
        if form == "alone":
            return f
        if form == "after":
            return f"{name} {f}"
        if form == "before":
            return f"{f} {name}"
        if form == "full":
            return f"{self.s_city_country(ctry, city)} {f}"
        return f"{name} {f}{f}" if rng.random() < 0.5 else f"{f} {name} {f}"

    def s_two_places(self, ctry: Country, city: City) -> str:
        rng = self.rng
        tpl = self.pick([t[1] for t in TWO_PLACE_TEMPLATES], [t[0] for t in TWO_PLACE_TEMPLATES])
        a = self.city_name(ctry, city)[0]
        if rng.random() < 0.5 and len(ctry.cities) > 1:
            b = self.city_name(ctry, self.city(ctry.code, exclude=city))[0]
        else:
            while True:
                cc2 = self.country()
                if cc2 != ctry.code:
                    break
            c2 = COUNTRIES[cc2]
            b = self.city_name(c2, self.city(cc2))[0]
            if rng.random() < 0.25:  # sometimes with countries spelt out
                a = f"{a}, {self.country_name(ctry, city, False)}"
                b = f"{b}, {self.zipf_pick(c2.en)}"
        return tpl.format(a=a, b=b)

    def s_region(self, ctry: Country, city: City) -> str:
        rng = self.rng
        r = rng.random()
        if r < 0.25 and city.region and ctry.code not in ("GB",):
            return city.region  # a state/province alone: "Texas", "Bavaria"
        if r < 0.45 and ctry.code in SUBREGIONS:
            return self.pick(SUBREGIONS[ctry.code])
        groups = self.group_by_country[ctry.code]
        names = self.pick([g[1] for g in groups], [g[0] for g in groups])
        return self.zipf_pick(names)

    def s_nickname(self, ctry: Country, city: City) -> str:
        rng = self.rng
        cc = ctry.code
        nick = CITY_NICKNAMES.get((cc, city.en))
        if nick is None or rng.random() < 0.3:
            # another nicknamed city of the same country, or the country itself
            pool = [c for c in ctry.cities if (cc, c.en) in CITY_NICKNAMES]
            if cc in COUNTRY_NICKNAMES and (not pool or rng.random() < 0.4):
                return self.zipf_pick(COUNTRY_NICKNAMES[cc])
            if pool:
                nick = CITY_NICKNAMES[(cc, self.zipf_pick(pool).en)]
        if nick is None:
            return self.s_bare_city(ctry, city)
        return self.zipf_pick(nick)

    def s_postcode(self, ctry: Country, city: City) -> str:
        s = postcode_string(self.rng, ctry.code, city, ctry)
        if s is None:  # try the country's main city before giving up
            s = postcode_string(self.rng, ctry.code, ctry.cities[0], ctry)
        return s if s is not None else self.s_city_country(ctry, city)

    def s_junk(self, ctry: Country, city: City) -> str:
        return self.zipf_pick(JUNK)

    def s_empty(self, ctry: Country, city: City) -> str:
        return "" if self.rng.random() < 0.92 else self.pick([" ", "  ", "\t"], [5, 2, 1])

    # -- rows --------------------------------------------------------------
    def rows(self, n: int):
        rng = self.rng
        span = (DATE_TO - DATE_FROM).days
        dates = sorted(DATE_FROM + dt.timedelta(days=rng.randint(0, span)) for _ in range(n))
        for i, joined in enumerate(dates, start=1):
            cc = self.country()
            kind = self.pick(KINDS, self.kind_w[cc])
            ctry = COUNTRIES[cc]
            city = self.city(cc)
            style = self.pick(self.styles, self.style_w)
            location = getattr(self, "s_" + style)(ctry, city)
            yield {
                "member_id": f"BWN-{i:06d}",
                "joined": joined.isoformat(),
                "station_kind": kind,
                "location": location,
                "_country": cc,
                "_style": style,
            }


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rows", type=int, default=DEFAULT_ROWS, help="number of members")
    ap.add_argument("--seed", type=int, default=DEFAULT_SEED, help="random seed")
    ap.add_argument("--out", default=DEFAULT_OUT, help="output CSV path")
    ap.add_argument(
        "--styles", action="store_true", help="print the realised typing-style mix to stderr"
    )
    args = ap.parse_args(argv)
    if args.rows < 0:
        ap.error("--rows must be >= 0")

    gen = Generator(args.seed)
    styles: Counter[str] = Counter()
    out_dir = os.path.dirname(os.path.abspath(args.out))
    os.makedirs(out_dir, exist_ok=True)
    with open(args.out, "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["member_id", "joined", "station_kind", "location"])
        for row in gen.rows(args.rows):
            styles[row["_style"]] += 1
            w.writerow([row["member_id"], row["joined"], row["station_kind"], row["location"]])

    size = os.path.getsize(args.out)
    print(f"wrote {args.rows} rows to {args.out} ({size:,} bytes)", file=sys.stderr)
    if args.styles and args.rows:
        for s in STYLE_WEIGHTS:
            print(
                f"  {s:14s} {styles[s]:6d}  {100 * styles[s] / args.rows:5.1f}%"
                f"  (target {STYLE_WEIGHTS[s]:g}%)",
                file=sys.stderr,
            )
    return 0


if __name__ == "__main__":
    sys.exit(main())
