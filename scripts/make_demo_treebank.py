#!/usr/bin/env python3
"""Write the invented demo treebank: visitor feedback cards from a fictional garden.

The scenario: visitors to the (invented) Larchmoss Botanic Garden leave short
feedback cards about its glasshouses, guided walks, café, gift shop, staff,
paths and events. Every sentence is generated here from a small phrase grammar,
so the trees are binary by construction and every node gets a sentiment label.

Labels are compositional (see ``compose``): each word has a polarity from
``POLARITY`` (absent words score 0), and a node's score is computed bottom-up
from its two children by these rules, tried in order:

    left is a negator leaf      s = factor * s_right   (factor < 0: flips and dampens)
    left is an intensifier leaf s = factor * s_right   (factor > 1)
    left is a diminisher leaf   s = factor * s_right   (0 < factor < 1)
    left is the leaf "but"      s = s_right            (a "contrast phrase")
    right is the leaf "!"       s = 5/4 * s_left
    right is a contrast phrase  s = 1/6 * s_left + s_right   ("X but Y" leans to Y)
    otherwise                   s = s_left + s_right

Scores are exact fractions (``fractions.Fraction``), so thresholds are exact and
the output is byte-identical on every machine. The score is bucketed into the
five classes by ``score_label``:

    s <= -3/2 -> 0 (very negative)     -3/2 < s <= -3/10 -> 1 (negative)
    -3/10 < s < 3/10 -> 2 (neutral)    3/10 <= s < 3/2 -> 3 (positive)
    s >= 3/2 -> 4 (very positive)

Randomness comes only from ``random.Random(seed).getrandbits`` (Mersenne
Twister words, the same stream in every Python 3 version) through ``below``;
no set or dict is ever iterated for a choice. Every word list is a pair
(common, rare): rare entries are drawn only while writing the dev and test
splits, so those hold words training never saw.

Usage:  python scripts/make_demo_treebank.py [--out-dir data_demo] [--seed 4711]
"""

from __future__ import annotations

import argparse
import random
from fractions import Fraction
from pathlib import Path

DEFAULT_SEED = 4711
DEFAULT_OUT_DIR = Path(__file__).resolve().parent.parent / "data_demo"

# (file name, number of trees, may use the *_RARE words)
SPLITS = (
    ("garden_train.trees", 3000, False),
    ("garden_dev.trees", 400, True),
    ("garden_test.trees", 600, True),
)
MIN_WORDS, MAX_WORDS = 3, 35
RARE_PERCENT = 8  # chance (in %) that a dev/test word slot draws from a rare list

# ---------------------------------------------------------------------------
# Composition: operator words and label buckets
# ---------------------------------------------------------------------------

NEGATORS = {
    "not": Fraction(-1, 2), "never": Fraction(-3, 5), "hardly": Fraction(-2, 5), "barely": Fraction(-2, 5),
}
INTENSIFIERS = {
    "very": Fraction(3, 2), "really": Fraction(3, 2), "truly": Fraction(3, 2), "so": Fraction(3, 2),
    "remarkably": Fraction(8, 5), "extremely": Fraction(7, 4), "incredibly": Fraction(7, 4),
    "absolutely": Fraction(7, 4), "highly": Fraction(3, 2), "definitely": Fraction(3, 2),
    "thoroughly": Fraction(3, 2), "genuinely": Fraction(3, 2), "well": Fraction(3, 2),
    "real": Fraction(3, 2), "total": Fraction(3, 2), "absolute": Fraction(7, 4),
}
DIMINISHERS = {
    "slightly": Fraction(1, 2), "somewhat": Fraction(1, 2), "mildly": Fraction(1, 2),
    "fairly": Fraction(7, 10), "rather": Fraction(7, 10),
}
CONTRAST_WORD = "but"
EXCLAIM_WORD, EXCLAIM_FACTOR = "!", Fraction(5, 4)
CONTRAST_LEFT_WEIGHT = Fraction(1, 6)

# label k is the first k with score <= upper bound; bounds are exact fractions
LABEL_UPPER_BOUNDS = (
    (Fraction(-3, 2), True), (Fraction(-3, 10), True), (Fraction(3, 10), False), (Fraction(3, 2), False),
)


def score_label(score: Fraction) -> int:
    """Bucket a phrase score into 0..4 (thresholds in the module docstring)."""
    for label, (bound, inclusive) in enumerate(LABEL_UPPER_BOUNDS):
        if score < bound or (inclusive and score == bound):
            return label
    return 4


# ---------------------------------------------------------------------------
# Polarity lexicon (every word not listed scores 0)
# ---------------------------------------------------------------------------

_POLARITY_GROUPS = (
    (Fraction(2), """
        wonderful excellent superb amazing fantastic brilliant perfect great stunning magical
        breathtaking gorgeous enchanting spotless delicious magnificent fascinating memorable
        outstanding marvellous spectacular loved adored love adore gem delight joy triumph
        delighted delight amazed amaze thrilled thrill
        exquisite sublime idyllic dazzling heavenly immaculate splendid blissful captivating
        cherished cherish marvel revelation enthralled enthral"""),
    (Fraction(1), """
        good lovely nice pleasant peaceful beautiful calm charming relaxing tranquil lush impressive
        inspiring well-kept clean spacious convenient clear modern accessible comfortable tasty
        fresh generous hearty healthy vibrant colourful fragrant striking informative fun engaging
        entertaining interesting well-organised friendly helpful knowledgeable cheerful kind patient
        welcoming polite funny enthusiastic attentive unique tasteful reasonable affordable
        enjoyed enjoy liked like appreciated appreciate admired admire impressed impress charmed charm
        welcomed welcome helped help smiled smile reassured reassure recommend return enough worth
        treat highlight bargain pleasure happily luckily
        serene picturesque wholesome sumptuous radiant courteous gracious relished relish
        savoured savour oasis haven sanctuary serenaded serenade beamed beam"""),
    (Fraction(1, 2), """
        fine okay decent tidy handy homemade handmade fair cheap adequate greeted greet chatted chat
        thanked thank verdant modest softly-spoken"""),
    (Fraction(-1, 2), """
        busy cold lukewarm dry tiny limited pricey sparse brown stuffy cramped tired sighed sigh
        hurried hurry overgrown sweltering drab"""),
    (Fraction(-1), """
        bad poor disappointing mediocre crowded noisy dirty neglected shabby gloomy muddy dull boring
        run-down chaotic smelly confusing broken tatty inadequate inaccessible slow stale bland soggy
        greasy overpriced tacky wilted droopy sickly dead rushed disorganised tedious rude unhelpful
        grumpy unfriendly dismissive impatient sullen abrupt steep expensive disliked dislike
        disappointed disappoint annoyed annoy confused confuse bored bore frustrated frustrate
        ignored ignore rushed rush scolded scold patronised patronise shouted shout grumbled grumble
        letdown disappointment mess chore sadly unfortunately
        grubby dingy insipid lacklustre sloppy shoddy unkempt surly brusque endured endure flop muddle
        dismayed dismay shooed shoo scowled scowl alas tawdry"""),
    (Fraction(-2), """
        awful terrible dreadful horrible filthy disgusting appalling hated hate disgrace shambles
        rip-off eyesore nightmare miserable
        abysmal squalid dilapidated dismal lamentable loathed loathe detested detest fiasco dump
        exorbitant"""),
)
POLARITY: dict[str, Fraction] = {}
for _value, _words in _POLARITY_GROUPS:
    for _w in _words.split():
        if _w in POLARITY and POLARITY[_w] != _value:
            raise ValueError(f"word {_w!r} has two polarities")
        POLARITY[_w] = _value


def word_score(word: str) -> Fraction:
    return POLARITY.get(word, Fraction(0))


def sign(x: Fraction) -> int:
    return (x > 0) - (x < 0)


# ---------------------------------------------------------------------------
# Vocabulary: (common, rare) word lists; entries separated by ";" or ","
# ---------------------------------------------------------------------------


def _entries(text: str) -> tuple[str, ...]:
    return tuple(" ".join(e.split()) for e in text.replace("\n", ";").split(";") if e.strip())


# Nouns by kind and number. A noun may have several tokens ("palm house").
NOUNS = {
    ("place", "sg"): (
        """palm house; fern grotto; orchid glasshouse; cactus hall; alpine house; lily house; rose walk;
        herb garden; rock garden; bog garden; arboretum; bamboo grove; kitchen garden; hedge maze; lake;
        tropical ravine; butterfly house; sensory garden; walled garden; woodland walk; wildflower meadow;
        winter garden; water garden; lily pond; treetop walkway; desert dome; mist house; glasshouse;
        heather garden; scented garden; cloud forest room; long border""",
        """succulent terrace; moss bank; gravel garden; dune garden; mangrove tank; spice corridor;
        citrus court; quarry garden; fernery; pinetum; orangery; conservatory; belvedere; shade border;
        peat terrace"""),
    ("place", "pl"): (
        """glasshouses; gardens; ponds; lawns; borders; greenhouses; flower beds""",
        """cloisters; rockeries; allotments"""),
    ("amenity", "sg"): (
        """café; gift shop; car park; entrance; ticket desk; visitor centre; playground; picnic lawn;
        signage; map; lift; cloakroom; main gate; audio guide; shuttle bus; wheelchair ramp;
        water fountain; bandstand; terrace; viewing platform; tea room; plant shop""",
        """boardwalk; footbridge; pergola; gazebo; sundial; turnstile; first aid post; pushchair park;
        drinking fountain; boot wash"""),
    ("amenity", "pl"): (
        """toilets; benches; paths; signs; bins; lockers; steps; picnic tables; railings;
        information boards; bike racks; plant labels""",
        """handrails; bench plaques; stepping stones; hammocks"""),
    ("food", "sg"): (
        """coffee; tea; soup; cake; lemonade; hot chocolate; carrot cake; quiche; salad; ice cream; lunch;
        breakfast; flapjack; fruit tart; toastie; elderflower cordial; mint tea; porridge""",
        """rhubarb crumble; ginger beer; sourdough; focaccia; nettle soup; sorbet; frittata; hummus;
        oat latte; matcha; tiffin; kombucha; granola; panini"""),
    ("food", "pl"): (
        """scones; sandwiches; pastries; cookies; pies; wraps; muffins; chips; biscuits""",
        """cardamom buns; brownies; pasties; crumpets; teacakes; meringues; macarons; samosas"""),
    ("shop", "sg"): (
        """guidebook; jigsaw; seed catalogue""",
        """apron; watering can; bonsai kit"""),
    ("shop", "pl"): (
        """postcards; seed packets; tote bags; mugs; prints; candles; tea towels; bulbs; plant pots;
        notebooks; books; souvenirs; gloves; calendars; cuttings; houseplants; jams""",
        """bookmarks; fridge magnets; trowels; honey jars; pressed flowers; enamel pins; terrariums;
        seed bombs; secateurs; wind chimes; soaps; keyrings"""),
    ("plant", "sg"): (
        """lavender; wisteria; ivy; jasmine; rosemary; bamboo""",
        """bougainvillea; hibiscus; frangipani; honeysuckle; clematis; mimosa"""),
    ("plant", "pl"): (
        """orchids; ferns; palms; cacti; succulents; water lilies; bromeliads; pitcher plants; tree ferns;
        mosses; magnolias; camellias; rhododendrons; tulips; bluebells; snowdrops; dahlias; peonies;
        roses; herbs; banana plants; cocoa trees; coffee bushes; vanilla vines; agaves; aloes; cycads;
        lilies; irises; carnivorous plants; alpines; flowers; trees; plants; blossoms; hedges""",
        """hellebores; foxgloves; sundews; flytraps; begonias; fuchsias; hostas; lupins; hollyhocks;
        gentians; saxifrages; echeverias; haworthias; euphorbias; proteas; banksias; acacias;
        olive trees; fig trees; lemon trees; pomegranates; passion flowers; anthuriums; philodendrons;
        monsteras; calatheas; cordylines; yuccas; ginkgos; sequoias; cedars; larches; hornbeams; birches;
        rowans; maples; witch hazels; quinces; medlars; crocuses; cyclamen; primroses; cowslips; violets;
        anemones; alliums; agapanthus; nasturtiums; sweet peas; marigolds; zinnias; sedges; lichens;
        liverworts; horsetails; staghorn ferns; air plants; tillandsias; heliconias; pepper vines;
        rubber trees; baobabs"""),
    ("event", "sg"): (
        """guided walk; night tour; lantern trail; seed swap; spring fair; orchid show; family trail;
        bird walk; sketching class; pruning workshop; tour; treasure hunt; open day; plant sale;
        harvest festival; bat walk; story time; yoga session; concert; craft workshop; photography walk""",
        """moth evening; fungi foray; bonsai demonstration; wreath workshop; wassail; poetry reading;
        choir evening; puppet show; pond dipping session; bug hunt; compost clinic; marmalade contest"""),
    ("staff", "sg"): (
        """guide; guard; gardener; volunteer; cashier; barista; ranger; curator; receptionist; waitress;
        waiter; manager; driver; steward; head gardener""",
        """horticulturist; botanist; docent; groundskeeper; porter; attendant; caretaker; warden;
        propagator; beekeeper; arborist"""),
    ("staff", "pl"): (
        """staff; gardeners; volunteers; guides; stewards; rangers; waiters; café staff""",
        """interns; apprentices"""),
    ("outing", "sg"): (
        """visit; day; trip; afternoon; morning; outing; experience; place; garden; day out; walk""",
        """excursion; pilgrimage; jaunt"""),
    ("price", "sg"): (
        """entry price; entrance fee; membership; parking charge; ticket price""",
        """season pass; annual pass"""),
    ("price", "pl"): (
        """tickets; prices; café prices; parking fees""",
        """concessions"""),
}

# invented first names of guides at the garden
GUIDE_NAMES = (
    """odwin; marisel; tamrin; felicke; brannagh; quillon; hesper; aldric; nyssa; corvin""",
    """ysolde; perrin; ambrel; thessaly; dorwen; kestrin; lisabet; oran; saffrey; wendeline""",
)

# who writes the cards (subjects and objects that are people)
PEOPLE = (
    """we; i; my kids; my partner; my mother; my father; our group; the children; my friends;
    my grandparents; my sister; my husband; my wife; my son; my daughter; the whole family; our family""",
    """my nephew; my niece; my godson; my aunt; my uncle; our book club; my colleagues; my flatmate;
    our toddler; my fiancé; the scouts; my neighbour; my in-laws""",
)

# adjectives that fit each kind of noun (polarity from POLARITY; unlisted ones are neutral)
ADJECTIVES = {
    "place": (
        """peaceful; beautiful; stunning; magical; breathtaking; gorgeous; enchanting; calm; charming;
        relaxing; tranquil; lush; impressive; inspiring; well-kept; spotless; clean; tidy; lovely;
        wonderful; great; good; nice; crowded; noisy; dirty; neglected; shabby; gloomy; stuffy; cramped;
        muddy; dull; boring; tired; run-down; chaotic; disappointing; awful; dreadful; humid; warm;
        quiet; large; small; dark; hot; busy; fine; okay; decent""",
        """serene; idyllic; picturesque; verdant; dingy; unkempt; dilapidated; overgrown; sweltering;
        squalid; misty; cavernous"""),
    "amenity": (
        """clean; spotless; tidy; spacious; convenient; clear; modern; accessible; comfortable; handy;
        lovely; good; excellent; great; dirty; filthy; smelly; confusing; crowded; cramped; broken;
        tatty; shabby; inadequate; inaccessible; slow; busy; poor; awful; new; old; wooden; narrow;
        fine; okay; adequate""",
        """immaculate; grubby; shoddy; dingy; squalid; makeshift"""),
    "food": (
        """delicious; tasty; fresh; homemade; generous; hearty; lovely; excellent; good; great; stale;
        bland; soggy; cold; lukewarm; greasy; overpriced; dry; tiny; disgusting; awful; mediocre;
        sweet; strong; hot; fine; okay; decent""",
        """sumptuous; wholesome; insipid; lacklustre; spicy"""),
    "shop": (
        """beautiful; lovely; charming; unique; affordable; tasteful; handmade; tacky; overpriced;
        pricey; limited; colourful; small; cheap; fine; great; good; poor""",
        """exquisite; shoddy; tawdry"""),
    "plant": (
        """healthy; vibrant; colourful; fragrant; lush; magnificent; striking; beautiful; stunning;
        gorgeous; lovely; wilted; droopy; neglected; sickly; sparse; brown; dead; tall; young;
        flowering; rare; exotic; tropical; fine""",
        """radiant; dazzling; verdant; overgrown; unkempt; variegated"""),
    "event": (
        """informative; fascinating; fun; engaging; entertaining; inspiring; interesting;
        well-organised; memorable; excellent; great; lovely; good; boring; rushed; disorganised; dull;
        tedious; confusing; disappointing; awful; long; short; free; crowded; fine; okay""",
        """captivating; splendid; sloppy; lacklustre; abysmal; impromptu"""),
    "staff": (
        """friendly; helpful; knowledgeable; cheerful; kind; patient; welcoming; polite; funny;
        charming; enthusiastic; attentive; lovely; great; rude; unhelpful; grumpy; unfriendly;
        dismissive; impatient; slow; sullen; abrupt; busy; young; new; tired; fine""",
        """courteous; gracious; surly; brusque; softly-spoken"""),
    "outing": (
        """wonderful; lovely; perfect; memorable; relaxing; pleasant; great; good; nice; fun;
        fantastic; amazing; superb; brilliant; disappointing; boring; awful; terrible; dreadful;
        horrible; miserable; bad; poor; mediocre; long; short; rainy; busy; fine; okay; decent""",
        """blissful; heavenly; sublime; dismal; lamentable; abysmal; leisurely"""),
    "price": (
        """reasonable; fair; affordable; cheap; steep; expensive; overpriced; high; low; fine; okay""",
        """exorbitant; modest"""),
}

# verbs: "past/base" pairs
PERSON_VERBS = (  # a person does this to a thing
    """loved/love; adored/adore; enjoyed/enjoy; liked/like; appreciated/appreciate; admired/admire;
    hated/hate; disliked/dislike""",
    """cherished/cherish; relished/relish; savoured/savour; loathed/loathe; detested/detest;
    endured/endure""",
)
NEUTRAL_ACTIONS = {  # what a person plainly did with each kind of thing (no polarity)
    "place": ("visited; explored; photographed; toured; saw; walked to; found", "sketched; circled"),
    "plant": ("photographed; saw; smelled; found; counted", "sketched; identified"),
    "event": ("booked; joined; attended; tried", "signed up for"),
    "food": ("ordered; tried; shared; bought", "sampled"),
    "shop": ("bought; browsed; looked at", "wrapped"),
    "amenity": ("used; found; passed", "located"),
}
THING_VERBS = (  # a thing does this to a person
    """impressed/impress; delighted/delight; amazed/amaze; charmed/charm; thrilled/thrill;
    disappointed/disappoint; annoyed/annoy; confused/confuse; bored/bore; frustrated/frustrate;
    surprised/surprise""",
    """enthralled/enthral; dismayed/dismay""",
)
STAFF_VERBS = (  # staff do this to us: "past/base"; objects follow
    """welcomed/welcome; helped/help; greeted/greet; thanked/thank; reassured/reassure; ignored/ignore;
    rushed/rush; scolded/scold; patronised/patronise; guided/guide; met/meet""",
    """serenaded/serenade; shooed/shoo""",
)
STAFF_INTRANSITIVE = (
    """smiled/smile; chatted/chat; sighed/sigh; shouted/shout; grumbled/grumble; hurried/hurry;
    waved/wave""",
    """beamed/beam; scowled/scowl""",
)
POLAR_NOUNS = (  # "the X was a gem"
    """gem; delight; joy; treat; highlight; bargain; triumph; pleasure; letdown; disappointment; mess;
    disgrace; shambles; rip-off; chore; eyesore; nightmare""",
    """marvel; revelation; oasis; haven; sanctuary; fiasco; dump; flop; muddle""",
)
WORTH_OBJECTS = (
    """the money; the ticket price; the entry fee; the trip; the drive; the wait; the visit;
    every penny; the detour; the queue""",
    """the bus fare; the train journey""",
)
DAYS = ("""monday; tuesday; wednesday; thursday; friday; saturday; sunday""", """bank holiday""")
SEASONS = ("""spring; summer; autumn; winter; april; may; june; july; august""",
           """january; february; march; september; october; november; december; midsummer""")
WEATHER = ("""rainy; sunny; windy; grey; bright; cold; hot; quiet""", """drizzly; blustery; sultry""")
SENTENCE_ADVERBS = ("""overall; honestly; sadly; unfortunately; happily; luckily""", """frankly; alas""")
LOCATION_PREPOSITIONS = ("in", "near", "by", "inside", "outside", "behind", "beside", "around")

VERB_INTENSIFIERS = ("really", "truly", "thoroughly", "genuinely", "absolutely")
ADJ_INTENSIFIERS = ("very", "really", "truly", "so", "remarkably", "extremely", "incredibly")
# before a noun ("the very helpful guide"): no "so"
ATTRIBUTIVE_INTENSIFIERS = ("very", "really", "truly", "remarkably", "extremely", "incredibly")
ADJ_DIMINISHERS = ("slightly", "somewhat", "mildly", "fairly", "rather")
NOUN_INTENSIFIERS = ("real", "total", "absolute")


def below(rng: random.Random, n: int) -> int:
    """Uniform integer in [0, n) by rejection from ``getrandbits`` (n <= 2**32).

    Written out rather than taken from ``randrange`` so the stream cannot change
    with the Python version.
    """
    bits = n.bit_length()
    while True:
        r = rng.getrandbits(bits)
        if r < n:
            return r


class WordPool:
    """Common words drawn with Zipf-like weights; rare words (dev/test only) taken in turn."""

    def __init__(self, common: tuple[str, ...], rare: tuple[str, ...] = ()) -> None:
        self.common = common
        self.rare = rare
        # weight 100 // (rank + 4): the head is about 25x as frequent as the tail
        self.cumulative = []
        total = 0
        for rank in range(len(common)):
            total += 100 // (rank + 4)
            self.cumulative.append(total)

    def draw(self, rng: random.Random, rare_turns: dict | None) -> str:
        """rare_turns: None (train: common words only) or {pool: how many rare words it gave}."""
        if rare_turns is not None and self.rare and below(rng, 100) < RARE_PERCENT:
            turn = rare_turns.get(self, 0)
            rare_turns[self] = turn + 1
            return self.rare[turn % len(self.rare)]
        r = below(rng, self.cumulative[-1])
        for i, c in enumerate(self.cumulative):
            if r < c:
                return self.common[i]
        raise AssertionError("unreachable")


def _pool(pair: tuple[str, str]) -> WordPool:
    return WordPool(_entries(pair[0]), _entries(pair[1]))


def _sign_pools(pair: tuple[str, str]) -> dict[int, WordPool]:
    """Split a (common, rare) adjective list into pools by polarity sign."""
    common, rare = _entries(pair[0]), _entries(pair[1])
    return {
        s: WordPool(tuple(w for w in common if sign(word_score(w)) == s),
                    tuple(w for w in rare if sign(word_score(w)) == s))
        for s in (1, -1, 0)
    }


NOUN_POOLS = {key: _pool(pair) for key, pair in NOUNS.items()}
ADJ_POOLS = {kind: _sign_pools(pair) for kind, pair in ADJECTIVES.items()}
PERSON_VERB_POOLS = _sign_pools(PERSON_VERBS)
THING_VERB_POOLS = _sign_pools(THING_VERBS)
STAFF_VERB_POOLS = _sign_pools(STAFF_VERBS)
STAFF_INTRANSITIVE_POOLS = _sign_pools(STAFF_INTRANSITIVE)
POLAR_NOUN_POOLS = _sign_pools(POLAR_NOUNS)
NEUTRAL_ACTION_POOLS = {kind: _pool(pair) for kind, pair in NEUTRAL_ACTIONS.items()}
GUIDE_POOL = _pool(GUIDE_NAMES)
PEOPLE_POOL = _pool(PEOPLE)
WORTH_POOL = _pool(WORTH_OBJECTS)
DAY_POOL, SEASON_POOL, WEATHER_POOL = _pool(DAYS), _pool(SEASONS), _pool(WEATHER)
SENTENCE_ADVERB_POOLS = _sign_pools(SENTENCE_ADVERBS)

# (kind, weight) for the subject of a "thing" clause
SUBJECT_KIND_WEIGHTS = (("place", 26), ("amenity", 18), ("food", 12), ("shop", 7), ("plant", 14),
                        ("event", 12), ("outing", 9), ("price", 5))


def _check_rare_entries_bring_new_tokens() -> None:
    """Every rare entry must hold a token no common list holds (a word train never sees)."""
    common_tokens: dict[str, None] = {}
    pairs = (*NOUNS.values(), *ADJECTIVES.values(), *NEUTRAL_ACTIONS.values(), GUIDE_NAMES, PEOPLE,
             PERSON_VERBS, THING_VERBS, STAFF_VERBS, STAFF_INTRANSITIVE, POLAR_NOUNS, WORTH_OBJECTS, DAYS,
             SEASONS, WEATHER, SENTENCE_ADVERBS)
    for common, _ in pairs:
        for entry in _entries(common):
            for token in entry.replace("/", " ").split():
                common_tokens[token] = None
    for _, rare in pairs:
        for entry in _entries(rare):
            if all(token in common_tokens for token in entry.replace("/", " ").split()):
                raise ValueError(f"rare entry {entry!r} has no token of its own")


_check_rare_entries_bring_new_tokens()

# ---------------------------------------------------------------------------
# Trees: a leaf is a str, an internal node a (left, right) tuple
# ---------------------------------------------------------------------------


def right_branch(*parts):
    """(a, (b, (c, d))): the usual shape of determiner/adverb/verb chains."""
    node = parts[-1]
    for part in reversed(parts[:-1]):
        node = (part, node)
    return node


def compound(entry: str):
    """A multi-token noun or name, left-branching: "water lily pond" -> ((water lily) pond)."""
    tokens = entry.split()
    node = tokens[0]
    for token in tokens[1:]:
        node = (node, token)
    return node


def leaves(node) -> list[str]:
    out: list[str] = []
    stack = [node]
    while stack:
        n = stack.pop()
        if isinstance(n, str):
            out.append(n)
        else:
            stack.append(n[1])
            stack.append(n[0])
    return out


def compose(left, right, s_left: Fraction, s_right: Fraction) -> Fraction:
    """Score of the node (left right) from its children's scores (rules in the module docstring)."""
    if isinstance(left, str):
        if left in NEGATORS:
            return NEGATORS[left] * s_right
        if left in INTENSIFIERS:
            return INTENSIFIERS[left] * s_right
        if left in DIMINISHERS:
            return DIMINISHERS[left] * s_right
        if left == CONTRAST_WORD:
            return s_right
    if right == EXCLAIM_WORD:
        return EXCLAIM_FACTOR * s_left
    if is_contrast_phrase(right):
        return CONTRAST_LEFT_WEIGHT * s_left + s_right
    return s_left + s_right


def is_contrast_phrase(node) -> bool:
    return not isinstance(node, str) and node[0] == CONTRAST_WORD


def render(node) -> tuple[str, Fraction]:
    """Bracketed text of a labelled tree and the score of its root."""
    if isinstance(node, str):
        if not node or any(c in node for c in " ()"):
            raise ValueError(f"leaf {node!r} must be one token without brackets")
        score = word_score(node)
        return f"({score_label(score)} {node})", score
    left, right = node
    text_left, s_left = render(left)
    text_right, s_right = render(right)
    score = compose(left, right, s_left, s_right)
    return f"({score_label(score)} {text_left} {text_right})", score


# ---------------------------------------------------------------------------
# The phrase grammar
# ---------------------------------------------------------------------------


class CardWriter:
    """Draws feedback-card sentences from the grammar with one seeded generator."""

    def __init__(self, rng: random.Random) -> None:
        self.rng = rng
        self.allow_rare = False  # dev/test switch this on
        self.rare_turns: dict[WordPool, int] = {}  # looked up by pool, never iterated

    # -- random helpers -----------------------------------------------------
    def chance(self, percent: int) -> bool:
        return below(self.rng, 100) < percent

    def one_of(self, options: tuple):
        return options[below(self.rng, len(options))]

    def weighted(self, options: tuple):
        """options: ((value, integer weight), ...)."""
        total = sum(w for _, w in options)
        r = below(self.rng, total)
        for value, w in options:
            if r < w:
                return value
            r -= w
        raise AssertionError("unreachable")

    def draw_from(self, pool: WordPool) -> str:
        return pool.draw(self.rng, self.rare_turns if self.allow_rare else None)

    def signed(self, pools: dict[int, WordPool], target: int) -> str:
        """A word of the wanted polarity sign (falls back to neutral when none exists)."""
        pool = pools[target]
        if not pool.common:
            pool = pools[0]
        return self.draw_from(pool)

    def polarity_target(self, pos: int = 45, neg: int = 37, neutral: int = 18) -> int:
        return self.weighted(((1, pos), (-1, neg), (0, neutral)))

    # -- noun phrases ------------------------------------------------------
    def noun(self, kind: str, number: str | None = None) -> tuple[object, str]:
        if number is None:
            has_pl = (kind, "pl") in NOUN_POOLS
            has_sg = (kind, "sg") in NOUN_POOLS
            number = "pl" if has_pl and (not has_sg or self.chance(45)) else "sg"
        return compound(self.draw_from(NOUN_POOLS[(kind, number)])), number

    def adjective_phrase(self, kind: str, target: int):
        """[intensifier | diminisher] adjective of the wanted polarity sign."""
        adj = self.signed(ADJ_POOLS[kind], target)
        roll = below(self.rng, 100)
        if roll < 22:
            return (self.one_of(ADJ_INTENSIFIERS), adj)
        if roll < 30 and target != 0:
            return (self.one_of(ADJ_DIMINISHERS), adj)
        return adj

    def thing_np(self, kind: str, target: int = 0, with_adjective: int = 25, det: str = "the"):
        """det [[intensifier] adjective] noun; returns (node, "sg" or "pl")."""
        noun, number = self.noun(kind)
        if kind == "staff" and self.chance(40):
            det = "our"
            if number == "sg" and self.chance(50):
                noun = ("guide", compound(self.draw_from(GUIDE_POOL)))
        if self.chance(with_adjective):
            adj = self.signed(ADJ_POOLS[kind], target)
            if target != 0 and self.chance(25):
                adj = (self.one_of(ATTRIBUTIVE_INTENSIFIERS), adj)
            noun = (adj, noun)
        return (det, noun), number

    def person_np(self):
        return compound(self.draw_from(PEOPLE_POOL))

    def location_pp(self):
        kind = self.weighted((("place", 3), ("amenity", 1)))
        np, _ = self.thing_np(kind, with_adjective=0)
        return (self.one_of(LOCATION_PREPOSITIONS), np)

    def time_pp(self):
        form = below(self.rng, 5)
        if form == 0:
            return ("on", compound(self.draw_from(DAY_POOL)))
        if form == 1:
            return ("on", ("a", (self.draw_from(WEATHER_POOL), compound(self.draw_from(DAY_POOL)))))
        if form == 2:
            return ("in", compound(self.draw_from(SEASON_POOL)))
        if form == 3:
            return ("in", ("the", self.one_of(("morning", "afternoon", "evening"))))
        return ("after", self.one_of(("lunch", ("the", "rain"), ("the", "tour"))))

    def adjunct(self, vp, percent: int, location: bool = True):
        """Attach a location, time or company PP to the right of a verb phrase."""
        if self.chance(percent):
            if not location:
                return (vp, self.time_pp())
            pp = self.weighted(((self.location_pp, 50), (self.time_pp, 35), (self.company_pp, 15)))()
            return (vp, pp)
        return vp

    def company_pp(self):
        """with my kids, with our group."""
        person = self.person_np()
        if person in ("we", "i"):
            person = ("my", "friends")
        return ("with", person)

    # -- clauses -----------------------------------------------------------
    def copula(self, number: str) -> str:
        past = self.chance(75)
        return ("was" if number == "sg" else "were") if past else ("is" if number == "sg" else "are")

    def negate(self, node, percent: int):
        """Wrap in a negator with the given chance."""
        if self.chance(percent):
            return (self.weighted((("not", 6), ("never", 2), ("hardly", 1), ("barely", 1))), node)
        return node

    def clause_copula_adjective(self, target: int):
        kind = self.weighted((*SUBJECT_KIND_WEIGHTS, ("staff", 16)))
        subject, number = self.thing_np(kind, target=self.polarity_target(), with_adjective=15)
        if self.chance(15):
            subject = (subject, self.location_pp())
        adjp = self.negate(self.adjective_phrase(kind, target), 22 if target != 0 else 3)
        return (subject, self.adjunct((self.copula(number), adjp), 20, location=False))

    def clause_copula_polar_noun(self, target: int):
        kind = self.weighted(SUBJECT_KIND_WEIGHTS)
        subject, number = self.thing_np(kind, with_adjective=10)
        noun = self.signed(POLAR_NOUN_POOLS, target if target != 0 else 1)
        if self.chance(35):
            intensifier = self.one_of(NOUN_INTENSIFIERS)
            article = "an" if intensifier[0] in "aeiou" else "a"
            obj = (article, (intensifier, noun))
        else:
            obj = ("an" if noun[0] in "aeiou" else "a", noun)
        return (subject, (self.copula(number), self.negate(obj, 15)))

    def clause_worth(self, target: int):
        kind = self.weighted((("place", 4), ("event", 4), ("outing", 3), ("food", 1)))
        subject, number = self.thing_np(kind, with_adjective=10)
        worth = ("worth", compound(self.draw_from(WORTH_POOL)))
        if target < 0:
            worth = (self.weighted((("not", 5), ("hardly", 1), ("barely", 1))), worth)
        elif target > 0 and self.chance(35):
            worth = ("well", worth)
        return (subject, (self.copula(number), worth))

    def clause_person_verb(self, target: int):
        if target == 0:
            return self.clause_neutral_fact(target)
        verb_pair = self.signed(PERSON_VERB_POOLS, target)
        past, base = verb_pair.split("/")
        kind = self.weighted((("place", 30), ("event", 16), ("food", 14), ("plant", 14), ("shop", 8),
                              ("amenity", 8), ("outing", 10)))
        obj, _ = self.thing_np(kind, target=sign(word_score(past)) if self.chance(50) else 0,
                               with_adjective=25)
        roll = below(self.rng, 100)
        if roll < 14:  # did not / did never ... enjoy
            vp = ("did", (self.weighted((("not", 5), ("never", 1))), (base, obj)))
        elif roll < 20:
            vp = (self.weighted((("never", 3), ("hardly", 1), ("barely", 1))), (past, obj))
        elif roll < 36:
            vp = (self.one_of(VERB_INTENSIFIERS), (past, obj))
        elif roll < 41:
            vp = (self.one_of(("somewhat", "mildly", "rather")), (past, obj))
        else:
            vp = (past, obj)
        return (self.person_np(), self.adjunct(vp, 40))

    def clause_thing_verb(self, target: int):
        verb_pair = self.signed(THING_VERB_POOLS, target)
        past, base = verb_pair.split("/")
        kind = self.weighted(SUBJECT_KIND_WEIGHTS)
        subject, number = self.thing_np(kind, with_adjective=15)
        obj = self.one_of(("us", "me", ("the", "children"), ("my", "kids"), "everyone", ("my", "mother")))
        roll = below(self.rng, 100)
        if roll < 15:
            vp = ("did", ("not", (base, obj)))
        elif roll < 30 and target != 0:
            vp = (self.one_of(("really", "truly", "genuinely")), (past, obj))
        elif roll < 36 and target != 0:
            vp = (self.one_of(("slightly", "somewhat", "mildly")), (past, obj))
        else:
            vp = (past, obj)
        return (subject, vp)

    def clause_staff(self, target: int):
        subject, number = self.thing_np("staff", with_adjective=15)
        if self.chance(60):
            past, base = self.signed(STAFF_VERB_POOLS, target).split("/")
            tail = self.one_of(("us", "us", "everyone", ("my", "kids"), ("the", "children")))
            core_past, core_base = (past, tail), (base, tail)
        else:
            past, base = self.signed(STAFF_INTRANSITIVE_POOLS, target).split("/")
            core_past, core_base = past, base
        roll = below(self.rng, 100)
        if roll < 14:
            vp = ("did", ("not", core_base))
        elif roll < 20:
            vp = ("never", core_past)
        elif roll < 30 and target != 0:
            vp = (self.one_of(("really", "genuinely")), core_past)
        else:
            vp = core_past
        return (subject, self.adjunct(vp, 35))

    def clause_recommend(self, target: int):
        modal = self.one_of(("would", "will", "would", "can"))
        if self.chance(55):
            kind = self.weighted((("place", 3), ("event", 2), ("food", 1), ("outing", 1)))
            obj, _ = self.thing_np(kind, with_adjective=15)
            core = ("recommend", obj)
            if self.chance(20):
                audience = self.one_of(("everyone", "anyone", ("our", "friends"), ("other", "families")))
                core = (core, ("to", audience))
        else:
            core = "return"
            modal = self.one_of(("will", "would", "shall"))
        if target < 0:
            vp = (self.weighted((("not", 3), ("never", 2))), core)
        elif target > 0 and self.chance(55):
            vp = (self.one_of(("highly", "definitely", "absolutely", "really")), core)
        else:
            vp = core
        return (self.person_np(), (modal, vp))

    def clause_there_enough(self, target: int):
        noun, number = self.noun("amenity", "pl") if self.chance(80) else self.noun("staff", "pl")
        quant = ("enough", noun)
        if target < 0 or (target == 0 and self.chance(50)):
            quant = ("not", quant)
        verb = "were" if self.chance(80) else "are"
        return self.adjunct(("there", (verb, quant)), 35)

    def clause_neutral_fact(self, target: int):
        """We visited the X on a rainy tuesday."""
        kind = self.weighted((("place", 8), ("plant", 4), ("event", 2), ("food", 2), ("shop", 1),
                              ("amenity", 1)))
        verb = self.draw_from(NEUTRAL_ACTION_POOLS[kind]).split()
        obj, _ = self.thing_np(kind, with_adjective=20)
        if len(verb) == 1:
            vp = (verb[0], obj)
        else:  # "walked to", "looked at", "signed up for": verb (particle... object)
            vp = (verb[0], right_branch(*verb[1:], obj))
        return (self.person_np(), self.adjunct(self.adjunct(vp, 45), 60))

    def clause(self, target: int):
        if target == 0 and self.chance(40):
            return self.clause_neutral_fact(target)
        form = self.weighted(((self.clause_copula_adjective, 40), (self.clause_person_verb, 16),
                              (self.clause_staff, 12), (self.clause_copula_polar_noun, 7),
                              (self.clause_thing_verb, 7), (self.clause_recommend, 8),
                              (self.clause_worth, 5), (self.clause_there_enough, 5)))
        return form(target)

    # -- sentences ---------------------------------------------------------
    def fragment(self):
        """Short verbless cards: "truly magical afternoon !", "not a great visit ."."""
        target = self.polarity_target(pos=55, neg=40, neutral=5)
        noun, _ = self.noun("outing", "sg")
        adj = self.adjective_phrase("outing", target)
        if self.chance(25):
            article = "an" if leaves(adj)[0][0] in "aeiou" else "a"
            core = ("not", (article, (adj, noun)))
        elif self.chance(15):
            article = "an" if leaves(adj)[0][0] in "aeiou" else "a"
            core = ("what", (article, (adj, noun)))
        else:
            core = (adj, noun)
        return core

    def clause_group(self):
        shape = self.weighted((("one", 36), ("but", 28), ("and", 18), ("three", 18)))
        first_target = self.polarity_target()
        first = self.clause(first_target)
        if shape == "one":
            return first
        if shape == "but":
            second_target = -first_target if first_target != 0 and self.chance(80) else self.polarity_target()
            second = self.clause(second_target)
            left = (first, ",") if self.chance(35) else first
            return (left, ("but", second))
        if shape == "and":
            same = first_target if self.chance(70) else self.polarity_target()
            return (first, ("and", self.clause(same)))
        middle = self.clause(first_target)
        last_target = -first_target if first_target != 0 and self.chance(75) else self.polarity_target()
        return ((first, ("and", middle)), ("but", self.clause(last_target)))

    def sentence(self):
        if self.chance(9):
            body = self.fragment()
        else:
            body = self.clause_group()
            if self.chance(14):
                intro_sign = self.weighted(((0, 6), (1, 2), (-1, 2)))
                intro = self.signed(SENTENCE_ADVERB_POOLS, intro_sign)
                if self.chance(25):
                    intro = self.one_of((("on", ("our", ("first", "visit"))), ("this", "time"),
                                         ("last", "weekend"), ("on", ("the", "whole"))))
                body = ((intro, ","), body)
        end = self.weighted(((".", 78), ("!", 16), (None, 6)))
        return (body, end) if end else body


def generate_splits(seed: int) -> list[tuple[str, list[str], list[int]]]:
    """(file name, bracketed lines, words per line) for each split; no sentence repeats."""
    rng = random.Random(seed)
    seen: set[str] = set()  # membership only, never iterated
    out = []
    writer = CardWriter(rng)
    for name, count, allow_rare in SPLITS:
        writer.allow_rare = allow_rare
        lines: list[str] = []
        lengths: list[int] = []
        while len(lines) < count:
            tree = writer.sentence()
            words = leaves(tree)
            if not MIN_WORDS <= len(words) <= MAX_WORDS:
                continue
            text = " ".join(words)
            if text in seen:
                continue
            seen.add(text)
            lines.append(render(tree)[0])
            lengths.append(len(words))
        out.append((name, lines, lengths))
    return out


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Write the invented botanical-garden demo treebank.")
    parser.add_argument("--out-dir", type=Path, default=DEFAULT_OUT_DIR, help="folder for the .trees files")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="seed of the sentence generator")
    args = parser.parse_args(argv)
    args.out_dir.mkdir(parents=True, exist_ok=True)
    for name, lines, lengths in generate_splits(args.seed):
        path = args.out_dir / name
        data = "".join(line + "\n" for line in lines).encode("utf-8")
        path.write_bytes(data)
        roots = [0] * 5
        for line in lines:
            roots[int(line[1])] += 1
        shares = " ".join(f"{k}:{100 * c / len(lines):.1f}%" for k, c in enumerate(roots))
        print(f"{path}: {len(lines)} trees, {len(data)} bytes, mean {sum(lengths) / len(lines):.2f} words, "
              f"root labels {shares}")


if __name__ == "__main__":
    main()
