"""Stop word lists: the function words of a language, dropped before counting.

The lists are common practice, written for this project from general knowledge of each
language's function words (articles, pronouns, auxiliaries, prepositions, conjunctions and
the commonest adverbs and particles). They are deliberately short: a word that is often a
content word as well (English "like", "back"; Spanish "estado"; Italian "stato", which
also mean "state") is left in the text, because dropping a meaningful term costs more
than keeping a frequent one, and frequent terms are down-weighted by idf anyway.

Every entry is written in the tokenizer's normal form (NFKC, case-folded: German "dass",
not "daß"), so a plain set lookup on a token works; ``tests/text/test_tokenize.py``
checks that. Words that the tokenizer never emits (one-letter words, French "l'"
elisions, which it strips) are not listed.

Languages with a list: english, german, french, spanish, italian, dutch, portuguese;
the Snowball variants "porter" (English) and "dutch_porter" share the list of their
language. Every other language has no stop words: tokenisation and stemming still work.
"""

from __future__ import annotations


def _words(text: str) -> frozenset[str]:
    """Split a whitespace-separated literal into a frozenset of words."""
    return frozenset(text.split())


ENGLISH = _words(
    """
    the an this that these those each every either neither some any no none all both
    few many much more most less least other others another such own same several enough
    me my mine myself we us our ours ourselves you your yours yourself yourselves he him his
    himself she her hers herself it its itself they them their theirs themselves one oneself
    who whom whose which what whatever whoever whichever whomever
    something anything nothing everything someone anyone everyone somebody anybody
    nobody everybody
    am is are was were be been being have has had having do does did doing done
    can could may might must shall should will would ought cannot
    i'm i've i'd i'll you're you've you'd you'll he'd he'll she'd she'll we're we've we'd
    we'll they're they've they'd they'll that'll there'll who'd who'll
    isn't aren't wasn't weren't hasn't haven't hadn't doesn't don't didn't can't couldn't
    won't wouldn't shan't shouldn't mustn't mightn't needn't ain't let
    about above across after against along amid amongst among around as at before behind
    below beneath beside besides between beyond by despite down during except for from in
    inside into near of off on onto out outside over past per since through throughout till
    to toward towards under underneath unlike until unto up upon via with within without
    and but or nor so yet if then than because although though while whilst whereas whether
    unless once else also
    not very too just only even here there where when why how now again ever never always
    often still already almost quite rather perhaps yes however thus therefore hence
    indeed further furthermore moreover meanwhile otherwise instead anyway somewhat soon
    thereby therein whereby wherein whereas hereby herein etc
    """
)

GERMAN = _words(
    """
    der die das des dem den ein eine einer eines einem einen kein keine keiner keines keinem
    keinen
    und oder aber denn sondern doch sowie als wie wenn weil dass ob obwohl damit während
    bevor nachdem sobald seit bis sowohl weder noch zwar jedoch trotzdem deshalb deswegen
    ich du er sie es wir ihr mich dich sich uns euch mir dir ihm ihn ihnen
    mein meine meiner meines meinem meinen dein deine deiner deines deinem deinen
    sein seine seiner seines seinem seinen ihre ihrer ihres ihrem ihren
    unser unsere unserer unseres unserem unseren euer eure eurer eures eurem euren
    dieser diese dieses diesem diesen jener jene jenes jenem jenen
    welcher welche welches welchem welchen wer wen wem wessen was man selbst
    solche solcher solches solchen manche mancher manches manchen einige einigen einiger
    in im ins an am ans auf aus bei beim mit nach von vom zu zum zur für fürs gegen ohne
    um durch über unter vor hinter neben zwischen wegen trotz statt ab
    bin bist ist sind seid war warst waren wart gewesen wäre wären
    habe hast hat haben habt hatte hattest hatten gehabt hätte hätten
    werde wirst wird werden werdet wurde wurden geworden würde würden
    kann kannst können konnte konnten könnte könnten muss musst müssen musste mussten
    soll sollst sollen sollte sollten will willst wollen wollte wollten darf dürfen mag
    möchte möchten
    nicht nichts auch noch schon nur sehr so da dort hier dann nun jetzt immer wieder mehr
    viel viele vielen etwas alle alles allem allen aller jeder jede jedes jedem jeden
    ja nein sonst also etwa bereits eben ganz gar mal hin her
    dabei dafür dazu darum daran darauf daraus darin davon dagegen darüber
    """
)

FRENCH = _words(
    """
    le la les un une des du de au aux ce cet cette ces
    mon ma mes ton ta tes son sa ses notre nos votre vos leur leurs
    je tu il elle on nous vous ils elles me te se lui eux moi toi soi en
    qui que quoi dont où lequel laquelle lesquels lesquelles duquel auquel
    et ou mais donc or ni car si comme quand lorsque puisque parce quoique
    dans par pour avec sans sous sur entre vers chez contre depuis pendant avant après
    selon envers
    ne pas plus moins très aussi bien encore déjà toujours jamais rien tout tous toute
    toutes autre autres même mêmes tel telle tels telles chaque quel quelle quels quelles
    ceci cela ça celui celle ceux celles ici là alors ainsi puis enfin cependant toutefois
    est es suis sommes êtes sont était étais étions étiez étaient été être sera seront
    serait seraient soit soient fut
    ai as avons avez ont avait avais avions aviez avaient eu avoir aura auront aurait
    auraient ait
    peut peuvent
    """
)

SPANISH = _words(
    """
    el la los las lo un una unos unas de del al en con por para sin sobre entre hacia hasta
    desde contra según durante ante bajo tras
    pero sino que porque como cuando donde si aunque pues mientras
    yo tú tu él ella ello nosotros nosotras vosotros vosotras ellos ellas usted ustedes
    me te se nos os le les mi mis tus su sus nuestro nuestra nuestros nuestras
    vuestro vuestra vuestros vuestras
    este esta estos estas esto ese esa esos esas eso aquel aquella aquellos aquellas aquello
    quien quienes cual cuales cuyo cuya qué quién cuál cómo dónde cuándo
    no sí ya muy más menos también tampoco todo toda todos todas otro otra otros otras
    mismo misma mismos mismas tan tanto tanta tantos tantas cada algo nada alguien nadie
    alguno alguna algunos algunas ninguno ninguna
    es son era eran fue fueron ser sido siendo soy somos está están estaba estaban estar
    estoy he has ha hemos han había habían haber hay sea sean
    así aquí allí entonces luego además sólo solo siempre nunca ahora antes después bien
    """
)

ITALIAN = _words(
    """
    il lo la gli le un uno una di da in con su per tra fra
    del dello della dei degli delle al allo alla ai agli alle dal dallo dalla dai dagli
    dalle nel nello nella nei negli nelle sul sullo sulla sui sugli sulle col coi
    ed od ma però anche se che chi cui come quando dove perché mentre né
    io tu lui lei egli ella esso essa noi voi loro essi esse mi ti si ci vi ne
    mio mia miei mie tuo tua tuoi tue suo sua suoi sue nostro nostra nostri nostre
    vostro vostra vostri vostre
    questo questa questi queste quello quella quelli quelle quel quei quegli
    non più meno molto molta molti molte poco tutto tutta tutti tutte altro altra altri
    altre stesso stessa stessi stesse ogni qualche nulla niente
    già ancora sempre mai poi così qui qua lì là ora solo
    sono sei siamo siete era erano fu furono essere sarà sarebbe sia siano
    ho hai ha abbiamo avete hanno aveva avevano avere avuto abbia
    """
)

DUTCH = _words(
    """
    de het een en of maar want dus dat die dit deze wie wat waar wanneer hoe waarom welke
    welk
    ik jij je hij zij ze wij we jullie mij me mijn jou jouw hem haar hun hen ons onze zich
    zichzelf
    in op aan bij met van voor naar uit over onder door tegen tussen na om tot sinds zonder
    binnen buiten achter naast toe af
    is ben bent zijn was waren geweest heb hebt heeft hebben had hadden gehad
    word wordt worden werd werden geworden zal zult zullen zou zouden kan kunt kunnen kon
    konden moet moeten moest mag mogen wil willen
    niet geen ook nog al alle alles er hier daar dan toen nu zo zeer heel veel meer meest
    weinig iets niets iemand niemand elk elke ieder iedere ander andere zelf wel even reeds
    steeds altijd nooit als omdat hoewel terwijl indien tenzij ja nee toch immers daarom
    echter
    """
)

PORTUGUESE = _words(
    """
    os as um uma uns umas de do da dos das em no na nos nas ao aos às por pelo pela pelos
    pelas para com sem sob sobre entre até desde contra
    ou mas nem que se porque como quando onde embora pois
    eu tu ele ela nós vós eles elas você vocês me te lhe lhes vos
    meu minha meus minhas teu tua teus tuas seu sua seus suas nosso nossa nossos nossas
    este esta estes estas isto esse essa esses essas isso aquele aquela aqueles aquelas
    aquilo quem qual quais cujo cuja
    não sim já muito muita muitos muitas mais menos também todo toda todos todas outro
    outra outros outras mesmo mesma tão tanto cada algo nada alguém ninguém algum alguma
    são era eram foi foram ser sido sou somos está estão estava estavam estar estou
    tem têm tinha tinham ter tido há havia haver seja sejam
    aqui ali lá então depois antes ainda sempre nunca agora só apenas bem assim
    """
)

# Keyed by the Snowball algorithm names of PyStemmer (``Stemmer.algorithms()``).
STOP_WORDS: dict[str, frozenset[str]] = {
    "english": ENGLISH,
    "porter": ENGLISH,
    "german": GERMAN,
    "french": FRENCH,
    "spanish": SPANISH,
    "italian": ITALIAN,
    "dutch": DUTCH,
    "dutch_porter": DUTCH,
    "portuguese": PORTUGUESE,
}

_EMPTY: frozenset[str] = frozenset()


def stop_words_for(language: str) -> frozenset[str]:
    """Return the stop words of `language`, or an empty set if it has no list.

    Parameters
    ----------
    language : str
        A Snowball algorithm name such as ``"english"``.

    Returns
    -------
    frozenset of str
        Words in the tokenizer's normal form (NFKC, case-folded).

    Examples
    --------
    >>> "the" in stop_words_for("english")
    True
    >>> stop_words_for("finnish")
    frozenset()
    """
    return STOP_WORDS.get(language, _EMPTY)
