"""Pure text handling: tokenisation, stop words, stemming, term weighting."""
