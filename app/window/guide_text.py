"""The words of the window's help: the short first-run guide, the user guide, and how to cite.

Kept apart from the widgets so the text can be read and edited as text. The user guide is HTML for
a ``QTextBrowser``; the table of coordinate functions and the list of file formats are filled in from
``phasewake.core.analyses.coordspec.FUNCTIONS`` and ``phasewake.core.readers.READERS`` so they cannot go stale.
"""

from __future__ import annotations

import html

SHORT_GUIDE = """<h3>Welcome to phasewake</h3>
<p>This window inspects a finished molecular-dynamics run. Here is where things are:</p>
<p><b>Runs</b> (left): every run you opened, with what its files hold. Add runs with <i>Add…</i>
or by dropping files on the window; state a time step, constraints or a temperature when the files
do not say.</p>
<p><b>Panels</b> (centre, one tab each): <b>Energy</b> shows the energy table and the audit's verdicts
first; <b>Phase space</b> a coordinate against its momentum (the current frame is the large dot, with its
recent path); <b>Correlation</b> how long the run remembers; <b>Sampling</b> whether parts of the run
(or replicas) agree; <b>Crossings</b> barrier crossings (click an event to jump to it); <b>Landscape</b>
the free-energy profile, whose states and dividing surface you can drag.</p>
<p><b>Verdicts and numbers</b> (above each figure): hover a title marked (?) to read what it is, how it
was computed, its threshold and what to do when it is off; click it to keep the note open.</p>
<p><b>Time ruler</b> (bottom): drag the cursor line, or use ←/→, PgUp/PgDn, Home/End; drag the shaded
band to restrict every analysis to part of the run.</p>
<p><b>Status area</b> (very bottom): progress of background work, with a button to cancel it (Esc).</p>
<p>The full user guide is under <i>Help ▸ User guide</i> (F1). The verdicts are heuristics: your
judgement and your group's practice decide.</p>"""

# Kept for callers of the earlier name.
GUIDE_TEXT = SHORT_GUIDE

USER_GUIDE_TOP = """<h2>phasewake user guide</h2>
<p>phasewake looks at molecular-dynamics runs that have already finished. It does not run
simulations; it reads what a run wrote (frames, velocities, energy tables, metadata) and asks whether
the run can be trusted and what it sampled: was energy conserved, is the kinetic temperature what it
should be, how correlated are the frames, did the run visit its phase space evenly, how often and how
cleanly did it cross a barrier.</p>

<h3>Opening runs</h3>
<p><i>File ▸ Open run files…</i> (Ctrl+O), <i>File ▸ Open run folder…</i> (Ctrl+Shift+F: the folder
your engine wrote; its trajectory parts, topology, energy file and log are found for you), dropping
files or a folder on the window, or <code>phasewake open FILES…</code> on the command line. Give the
files of one run together: a trajectory, its topology and its energy tables. Several H5MD or HDF5 files given together are
replicas, one run each; the Sampling panel compares them. When the files do not say, state the time
step, the number of constraints and the thermostat temperature in the Runs list (or with
<code>--timestep</code>, <code>--constraints</code>, <code>--temperature</code>). Opening reads
headers only; frames are read in chunks when an analysis needs them, so large files open quickly.</p>

<h3>The panels</h3>
<dl>
<dt><b>Energy</b></dt><dd>The energy table against time and the verdicts of the audit: drift of the
conserved energy with its error, the fluctuation ratio, jumps, non-finite values, gaps in time, the
kinetic temperature and equipartition between groups, and the time step against the fastest motion
found in the velocity spectrum.</dd>
<dt><b>Phase space</b></dt><dd>The chosen coordinate q against its conjugate momentum p (the current
frame is the large dot, <b>T</b> toggles its recent path), its density in the (q, p) plane, q against
time, principal components with their explained variance, and with a second coordinate
(<i>Analysis ▸ Second coordinate…</i>) coordinate pairs and a Poincaré section.</dd>
<dt><b>Correlation</b></dt><dd>Autocorrelation functions with the statistical inefficiency g, the
integrated time τ and the effective sample size; blocking curves; the velocity autocorrelation and the
vibrational spectrum when velocities are stored.</dd>
<dt><b>Sampling</b></dt><dd>Split R-hat between segments of the run (or replicas), the divergence
between halves of the run, running averages and how the visited part of phase space grows.</dd>
<dt><b>Crossings</b></dt><dd>Events where the coordinate goes from one core state to the other, with
recrossings of the dividing surface told apart; dwell-time distributions, rates with their intervals
and the transmission coefficient. Selecting a row of the event table moves the cursor there and draws
that crossing thick in the phase portrait.</dd>
<dt><b>Landscape</b></dt><dd>The free-energy profile along the coordinate with the two states and the
dividing surface drawn; drag them to redefine them, and the Crossings panel follows.</dd>
</dl>
<p>Every panel is computed in the background; the status area shows progress and <b>Esc</b> cancels.
A panel whose analysis cannot run says why in plain words; nothing is made up. Above each figure the
verdicts (● ok, ▲ caution, ✖ problem, ■ information) and the numbers of the figure are listed: hover a
title marked (?) for its explanation, click to keep it open beside the list.</p>

<h3>Time: cursor and window</h3>
<p>One cursor (a frame) is shared by every panel: drag it on any time axis or on the time ruler, step
it with ←/→, jump with PgUp/PgDn, go to the ends with Home/End. Dragging the shaded band on the ruler
restricts every analysis to that part of the run (to leave out equilibration, for instance); the
panels recompute once you let go. <i>Analysis ▸ Whole run</i> (Ctrl+0) undoes it.</p>

<h3>Large runs: memory and the result cache</h3>
<p>Frames are read in chunks, so memory stays bounded whatever the size of the file: a few times
the chunk budget (128 MB unless <code>--chunk-mb</code> or <code>PHASEWAKE_CHUNK_MB</code> says
otherwise). Results are kept in a cache folder (never beside your files), keyed by the files' identity
and every setting, so a panel shown again or a run opened again is not recomputed; a changed file is
recomputed. <i>Analysis ▸ Use the result cache</i> turns this off, <i>Analysis ▸ Clear the result
cache</i> empties the folder (the command line has <code>phasewake cache --clear</code>).</p>

<h3>Sessions and export</h3>
<p><i>File ▸ Save session</i> writes the whole state (files, coordinates, states, time window, panel
choices) into a small JSON file of our own (<code>.pwsession</code>), written atomically; open it again
with <i>File ▸ Open session…</i> or <code>phasewake open --session FILE</code>. <i>Export</i> writes
the figure on screen (PNG, SVG, PDF), its data (CSV) or a PDF report of the run; what is exported is
what the panel shows. Exports run in the background (the window stays usable; the status line says when
the file is written). Each exported file records where it came from in its metadata (PNG text, SVG
metadata, PDF Subject, CSV header lines): the phasewake version, the settings, and every input file by
its <b>file name</b> (never the folder it sits in on your machine) with its SHA-256 checksum and size,
so the figure can be traced to its input wherever the files now live (<code>sha256sum FILE</code> gives
the same checksum).</p>
"""

USER_GUIDE_UNITS = """<h3>Units</h3>
<p>Inside phasewake and in everything it writes: lengths in nm, time in ps, masses in amu (g/mol),
energies in kJ/mol, temperatures in K, velocities in nm/ps, angles in rad, rates in 1/ps, wavenumbers
in cm⁻¹. Files in other units (Å, fs, kcal/mol, eV, …) are converted on reading when their headers
or format say which unit they use. Every number written out names its unit.</p>

<h3>Cautions</h3>
<p>The diagnostics are heuristics. Each threshold is a starting point with its source named (a paper,
or common practice), and each verdict says what was measured against what. A green mark does not
prove a run is right, and a red one does not prove it wrong: frames are correlated, runs are finite,
and some checks assume an ensemble (NVE or canonical) that your run may not follow. Your own judgement
and your group's practice decide whether a run is good enough.</p>
"""


def coordinate_section() -> str:
    """The coordinate specification, with its functions listed from the parser itself."""
    from phasewake.core.analyses.coordspec import FUNCTIONS

    rows = []
    for name, (kinds, required, unit, what) in FUNCTIONS.items():
        args = []
        for i, kind in enumerate(kinds):
            label = {"atom": "atom", "group": "group", "path": "reference", "int": "k"}.get(kind, kind)
            args.append(label if i < required else f"[{label}]")
        rows.append(f"<tr><td><code>{html.escape(name)}({', '.join(args)})</code></td>"
                    f"<td>{html.escape(what)}</td><td>{html.escape(unit)}</td></tr>")
    return ("<h3>The coordinate specification</h3>"
            "<p>A coordinate is written as one function call, the same on the command line and in the "
            "window (<i>Analysis ▸ Coordinate…</i>, Ctrl+K, builds it for you from lists of atoms). Atoms "
            "are 0-based indices; <code>a-b</code> is a range including both ends; a group is an index, a "
            "range, a list in square brackets such as <code>[0, 4-7]</code>, or a quoted atom selection "
            "passed unchanged to mdtraj (its rules, and it needs a topology). Where one atom is expected, a "
            "quoted selection of exactly one atom works too.</p>"
            "<table border='1' cellpadding='3' cellspacing='0'><tr><th>function</th><th>value</th>"
            "<th>unit</th></tr>" + "".join(rows) + "</table>"
            "<p>Examples: <code>distance(0, 1)</code>, <code>dihedral(4, 6, 8, 14)</code>, "
            "<code>com_distance(0-9, [20, 22])</code>, <code>rg(\"protein\")</code>, "
            "<code>rmsd(start.pdb, \"name CA\")</code>, <code>pc(1)</code>. A mistake is reported with "
            "the position of the character that could not be read.</p>")


def formats_section() -> str:
    """The file formats read, listed from the reader registry."""
    try:
        from phasewake.core.readers import READERS
    except ImportError:
        items = ["(the readers are not in this build)"]
    else:
        items = [f"{html.escape(r.description)}: <code>{html.escape(' '.join(r.suffixes))}</code>" for r in READERS]
    return ("<h3>File formats read</h3><ul>" + "".join(f"<li>{i}</li>" for i in items) + "</ul>"
            "<p>Inputs are opened read-only. H5MD files follow the H5MD specification (de Buyl, Colberg "
            "and Höfling 2014); trajectories and topologies other than H5MD are read through mdtraj; energy "
            "tables are text tables with a header row naming each column and, in brackets, its unit, for "
            "example <code>time (ps), potential energy (kJ/mol), T (K)</code>.</p>")


def user_guide_html() -> str:
    """The whole user guide as HTML."""
    return USER_GUIDE_TOP + coordinate_section() + formats_section() + USER_GUIDE_UNITS


# The papers whose methods phasewake uses (as cited beside the code), for the About box.
CITATIONS: tuple[tuple[str, str], ...] = (
    ("Energy conservation, shadow Hamiltonian, kinetic temperature",
     "M. E. Tuckerman, Statistical Mechanics: Theory and Molecular Simulation, Oxford University Press (2010)"),
    ("Blocking", "H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989)"),
    ("Integrated autocorrelation time, automatic window",
     "A. D. Sokal, Monte Carlo Methods in Statistical Mechanics, NATO ASI Series B 361 (1997)"),
    ("Initial positive sequence", "C. J. Geyer, Statistical Science 7, 473 (1992)"),
    ("Statistical inefficiency (first zero)",
     "J. D. Chodera, W. C. Swope, J. W. Pitera, C. Seok and K. A. Dill, J. Chem. Theory Comput. 3, 26 (2007)"),
    ("Equilibration detection", "J. D. Chodera, J. Chem. Theory Comput. 12, 1799 (2016)"),
    ("Rank-normalised split R-hat",
     "A. Vehtari, A. Gelman, D. Simpson, B. Carpenter and P.-C. Bürkner, Bayesian Analysis 16, 667 (2021)"),
    ("Jensen-Shannon divergence", "J. Lin, IEEE Trans. Inf. Theory 37, 145 (1991)"),
    ("Ergodic measure", "R. D. Mountain and D. Thirumalai, J. Phys. Chem. 93, 6975 (1989); D. Thirumalai, "
     "R. D. Mountain and T. R. Kirkpatrick, Phys. Rev. A 39, 3563 (1989)"),
    ("Barrier crossing in the diffusive limit", "H. A. Kramers, Physica 7, 284 (1940)"),
    ("Reactive flux, transmission coefficient",
     "C. H. Bennett, in Algorithms for Chemical Computations, ACS Symposium Series 46 (1977); "
     "D. Chandler, J. Chem. Phys. 68, 2959 (1978)"),
    ("Core-set state assignment and rates", "N.-V. Buchete and G. Hummer, J. Phys. Chem. B 112, 6057 (2008)"),
    ("Effective mass of a coordinate",
     "E. A. Carter, G. Ciccotti, J. T. Hynes and R. Kapral, Chem. Phys. Lett. 156, 472 (1989)"),
    ("Cosine content of principal components", "B. Hess, Phys. Rev. E 65, 031910 (2002)"),
    ("Randomized principal components",
     "N. Halko, P.-G. Martinsson and J. A. Tropp, SIAM Review 53, 217 (2011)"),
    ("Essential dynamics", "A. Amadei, A. B. M. Linssen and H. J. C. Berendsen, Proteins 17, 412 (1993)"),
    ("Quasi-harmonic frequencies", "M. Karplus and J. N. Kushick, Macromolecules 14, 325 (1981)"),
    ("Green-Kubo diffusion", "M. S. Green, J. Chem. Phys. 22, 398 (1954); R. Kubo, J. Phys. Soc. Jpn. 12, "
     "570 (1957)"),
    ("Finite-size correction of D", "I.-C. Yeh and G. Hummer, J. Phys. Chem. B 108, 15873 (2004)"),
    ("Vibrational density of states", "J. M. Dickey and A. Paskin, Phys. Rev. 188, 1407 (1969)"),
    ("Colour-blind-safe palette", "M. Okabe and K. Ito, Color Universal Design (2008)"),
    ("H5MD files", "P. de Buyl, P. H. Colberg and F. Höfling, Comput. Phys. Commun. 185, 1546 (2014)"),
    ("Reading trajectories", "R. T. McGibbon et al., Biophys. J. 109, 1528 (2015) (MDTraj)"),
)


__all__ = ["CITATIONS", "GUIDE_TEXT", "SHORT_GUIDE", "coordinate_section", "formats_section",
           "user_guide_html"]
