"""Header cards of an output image: what it keeps from its input, and HISTORY text.

An output on the input's grid keeps the input's axis structure (the two image axes and
any degenerate axes, such as a frequency or Stokes axis with NAXISn = 1, in their
order), the input's own world-coordinate cards as written, and the cards that describe
the observation rather than the pixels (`KEPT_KEYWORDS`: OBJECT, TELESCOP, DATE-OBS,
RESTFRQ, ...).  Everything else is left out: cards that describe the input's pixels
(BUNIT, the restoring beam, BSCALE/BZERO/BLANK, DATAMIN/DATAMAX, checksums), its
HISTORY and COMMENT text, its DATE and ORIGIN (the output is a new file made by
skyscale), and keywords not listed here, whose meaning skyscale cannot know.  The
writer then adds what is true of the output.

HISTORY is commentary: a card holds `HISTORY_WIDTH` characters of text [1]_.  A longer
entry is continued over several cards, each continuation starting with
`HISTORY_INDENT`; breaks fall before a space or after a separator, so no number or
name is cut unless one token is longer than a card.  Joining an entry's cards by
dropping the indent of each continuation gives back its text exactly (`join_history`).

References
----------
.. [1] FITS Standard 4.0 (IAU FITS Working Group 2018), sec. 4.4.2.4 (commentary
   keywords) and 4.4.2.1-4.4.2.3 (DATE-OBS, OBJECT, TELESCOP, INSTRUME, OBSERVER,
   EQUINOX, EPOCH, AUTHOR, REFERENC); sec. 8 and Table 22 (world-coordinate
   keywords); sec. 9 (time keywords).
.. [2] Greisen & Calabretta 2002, A&A 395, 1061; Calabretta & Greisen 2002, A&A 395,
   1077; Greisen et al. 2006, A&A 446, 747: celestial and spectral coordinates.
"""

import re

from astropy.io import fits

__all__ = ["HISTORY_WIDTH", "HISTORY_INDENT", "KEPT_KEYWORDS", "is_axis_card",
           "is_observation_card", "kept_cards", "wrap_history", "join_history"]

#: Characters of text one HISTORY card holds [1]_.
HISTORY_WIDTH = 72
#: How a HISTORY card that continues the entry before it starts.
HISTORY_INDENT = "  "

#: Keywords about the observation, kept from the input (also with an alternate-WCS
#: letter where the standard allows one): the standard's descriptive keywords [1]_,
#: world-coordinate and time keywords that are not tied to one axis [1]_ [2]_, and, as
#: common practice, OBSRA/OBSDEC, RESTFREQ and VELREF.
KEPT_KEYWORDS = frozenset({
    "OBJECT", "TELESCOP", "INSTRUME", "OBSERVER", "AUTHOR", "REFERENC",
    "DATE-OBS", "MJD-OBS", "DATE-BEG", "MJD-BEG", "DATE-AVG", "MJD-AVG", "DATE-END",
    "MJD-END", "TSTART", "TSTOP", "XPOSURE", "TELAPSE", "TIMESYS", "TREFPOS", "TREFDIR",
    "TIMEUNIT", "TIMEOFFS", "PLEPHEM", "MJDREF", "MJDREFI", "MJDREFF", "JDREF", "JDREFI",
    "JDREFF", "DATEREF", "OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z", "OBSGEO-L", "OBSGEO-B",
    "OBSGEO-H", "OBSRA", "OBSDEC", "EPOCH", "RADECSYS", "RESTFREQ", "VELREF",
    "WCSNAME", "RADESYS", "EQUINOX", "LONPOLE", "LATPOLE", "RESTFRQ", "RESTWAV",
    "SPECSYS", "SSYSOBS", "SSYSSRC", "VELOSYS", "ZSOURCE", "VELANGL",
})
_ALTERNATE = ("WCSNAME", "RADESYS", "EQUINOX", "LONPOLE", "LATPOLE", "RESTFRQ", "RESTWAV",
              "SPECSYS", "SSYSOBS", "SSYSSRC", "VELOSYS", "ZSOURCE", "VELANGL")
_KEPT = re.compile("(" + "|".join(map(re.escape, sorted(_ALTERNATE))) + ")[A-Z]$")
#: Keywords tied to axes: indexed keywords and matrices (also in the older PCiiijjj form).
_AXIS = re.compile(r"(WCSAXES[A-Z]?|(CTYPE|CUNIT|CRVAL|CDELT|CRPIX|CROTA|CNAME|CRDER|CSYER"
                   r"|CZPHS|CPERI)[1-9][0-9]*[A-Z]?|(PC|CD|PV|PS)[1-9][0-9]*_[0-9]+[A-Z]?"
                   r"|(PC|CD)[0-9]{6})$")
#: Where a long HISTORY entry may break: after these characters, or before a space.
_SEPARATORS = ",;:/|&)]}="


def is_axis_card(key):
    """True for a world-coordinate keyword tied to axes (CTYPEn, CRPIXn, PCi_j, ...)."""
    return bool(_AXIS.match(str(key).upper()))


def is_observation_card(key):
    """True for an observation card an output keeps (`KEPT_KEYWORDS` and their
    alternate-WCS forms)."""
    return key in KEPT_KEYWORDS or bool(_KEPT.match(key))


def _image_dims(source, shape):
    """FITS axis lengths of ``source`` when they describe ``shape``, else None."""
    naxis = source.get("NAXIS")
    if naxis is None:
        return [shape[1], shape[0]]
    dims = [source.get(f"NAXIS{k}") for k in range(1, int(naxis) + 1)]
    if len(dims) < 2 or (dims[1], dims[0]) != tuple(shape) or any(n != 1 for n in dims[2:]):
        return None
    return dims


def kept_cards(source, shape):
    """The input's cards an output of ``shape`` keeps, and the output's numpy shape.

    Parameters
    ----------
    source : astropy.io.fits.Header
        The input's header.
    shape : (ny, nx) tuple
        The output image.

    Returns
    -------
    header : astropy.io.fits.Header
        The observation cards (`KEPT_KEYWORDS`) and, when the input's first two axes are
        ``shape`` and any further axes are degenerate, every world-coordinate card tied
        to axes; values and comments as in the input, in its order.
    out_shape : tuple of int
        ``shape`` with a leading 1 for each degenerate input axis (numpy order), so the
        written file has the input's axis structure; ``shape`` itself otherwise.
    axes_kept : bool
        Whether the axis cards were kept (False: the caller writes the celestial WCS).

    Examples
    --------
    >>> h = fits.Header({"NAXIS": 3, "NAXIS1": 4, "NAXIS2": 3, "NAXIS3": 1,
    ...                  "CTYPE3": "FREQ", "OBJECT": "field", "DATAMAX": 2.0})
    >>> out, shape, axes = kept_cards(h, (3, 4))
    >>> list(out), shape, axes
    (['CTYPE3', 'OBJECT'], (1, 3, 4), True)
    """
    dims = _image_dims(source, tuple(shape))
    out = fits.Header()
    for card in source.cards:
        key = card.keyword.upper()
        if is_observation_card(key) or (dims is not None and is_axis_card(key)):
            out.append((card.keyword, card.value, card.comment))
    if dims is None:
        return out, tuple(shape), False
    return out, (1,) * (len(dims) - 2) + tuple(shape), True


def _printable(text):
    text = str(text).encode("ascii", "backslashreplace").decode("ascii")
    return "".join(c if " " <= c <= "~" else c.encode("unicode_escape").decode("ascii")
                   for c in text).rstrip()


def _break_at(text, room):
    """Where to end a card holding the start of ``text`` (at most ``room`` characters)."""
    best = 0
    for i in range(1, room + 1):
        if i < len(text) and text[i] == " " and text[i - 1] != " ":
            best = i                                       # before a space
        elif text[i - 1] in _SEPARATORS:
            best = i                                       # after a separator
    if best == 0:
        best = room                                        # one token longer than a card
        while best > 1 and text[best - 1] == " ":
            best -= 1
    return best


def wrap_history(text, width=HISTORY_WIDTH):
    """One HISTORY entry as card texts of at most ``width`` characters.

    Parameters
    ----------
    text : str
        The entry; characters outside printable ASCII are written as backslash escapes.
        FITS does not keep trailing blanks [1]_, so they are dropped, and a run of
        blanks longer than a continuation card can hold is shortened to fit.
    width : int
        Characters of text per card (default `HISTORY_WIDTH`).

    Returns
    -------
    list of str
        The first card's text, then continuations starting with `HISTORY_INDENT`.

    Examples
    --------
    >>> lines = wrap_history("scales = [0.0, 4.0, 8.0, 16.0]", width=20)
    >>> lines
    ['scales = [0.0, 4.0,', '   8.0, 16.0]']
    >>> join_history(lines)
    ['scales = [0.0, 4.0, 8.0, 16.0]']
    """
    longest = width - len(HISTORY_INDENT) - 1
    text = re.sub(f" {{{longest + 1},}}", " " * longest, _printable(text))
    lines, prefix = [], ""
    while len(prefix) + len(text) > width:
        cut = _break_at(text, width - len(prefix))
        lines.append(prefix + text[:cut])
        text, prefix = text[cut:], HISTORY_INDENT
    lines.append(prefix + text)
    return lines


def join_history(lines):
    """The entries of HISTORY card texts: each continuation joined to the entry before it.

    Parameters
    ----------
    lines : iterable of str
        Card texts in order, for example ``list(header["HISTORY"])``.

    Returns
    -------
    list of str
    """
    entries = []
    for line in lines:
        line = str(line)
        if line.startswith(HISTORY_INDENT) and entries:
            entries[-1] += line[len(HISTORY_INDENT):]
        else:
            entries.append(line)
    return entries
