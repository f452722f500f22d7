// Package segment turns grey-scale reconstructions (uint8, uint16 or
// float32) into phase labels — solid, wetting, nonwetting and
// phase.Outside — tile by tile, with results that do not depend on the
// tiling.
//
// # Flow of one step
//
//  1. Every tile: Histogram(grey core+halo, core, p, mask) filters the tile
//     (pkg/filter: 3×3×3 median, Gaussian or non-local means) and bins the
//     filtered core voxels. Histograms merge with Hist.Add (integer counts:
//     exact). float32 data first need a range: MeasureExtent per tile,
//     Extent.Add, Extent.Range.
//  2. Once per step: ComputeThresholds(merged, p) — 3-class Otsu (Liao, Chen
//     & Chung 2001, J. Inf. Sci. Eng. 17:713) or, in reference mode, 2-class
//     Otsu (Otsu 1979, IEEE Trans. SMC 9:62) or the isodata fixed point
//     (Ridler & Calvard 1978, IEEE Trans. SMC 8:630) on the merged histogram,
//     or fixed values from the config. (The function is not called Thresholds
//     because that is the name of its result type.) It first decides how
//     many phases the step holds (DecidePhases, phases.go: Otsu's split
//     separation and a far-side excess test on the merged histogram, or
//     Params.Fluids): a step with one fluid gets one threshold fewer and
//     is never forced into three phases. In threshold scope "campaign"
//     (Params.ThresholdScope) CampaignStep then replaces them with the
//     campaign's thresholds, shifted for the measured grey-level drift
//     (campaign.go; docs/segmentation-thresholds.md).
//  3. Every tile: Segment(grey core+halo, core, th, p, mask) returns the
//     labels of the core.
//
// The sample cylinder is fixed for a campaign: give it in Params.Sample, or
// find it once with DetectSample from a merged histogram (per-block grey
// statistics travel with the histogram and merge exactly).
//
// # Binning
//
// uint8: 256 bins of one grey value. uint16: Bins (power of two, 16..1024,
// default 1024) bins of 65536/Bins grey values. float32: Bins bins over
// Params.Range. The binning depends only on dtype and Params, so all tiles of
// a step bin alike and their counts add. float32 scans (attenuation values,
// negative ones included) without a configured range take it from the
// step's filtered extent; in threshold scope "campaign" that extent is
// widened by FloatMargin on either side and, once a step fixes the
// campaign thresholds, stored with them (CampaignThresholds.Range, Bins),
// and every later step bins over it (CampaignBinning): one binning per
// campaign, as for integer scans. A NaN or ±Inf grey value is refused
// (Histogram, MeasureExtent) naming its voxel; the services refuse the
// file before that (volio.CheckFinite). Thresholds are bin centres, as
// scikit-image returns them, and a voxel above a threshold belongs to the
// brighter class.
//
// # Reference-scan mode
//
// A high-quality scan of the same sample, segmented once, gives the solid
// mask (labels with Codes.Solid and phase.Outside). Each step then only
// separates the two fluids inside the pore space with one 2-class Otsu
// threshold taken from the pore voxels' histogram.
//
// # Partial-volume correction
//
// The scanner blur mixes a pore voxel next to the solid with solid grey: with
// the nonwetting phase darkest and the solid brightest a nonwetting voxel at a
// grain looks like brine. With b = G_σ ∗ 1_solid (the solid indicator blurred
// by the point-spread Gaussian, σ = PartialVolume.Blur voxels) the grey of a
// pore voxel is modelled as v = (1 − b)·μ_f + b·μ_s, so the fluid grey is
// μ_f = (v − b·μ_s)/(1 − b), with b capped at MaxFraction. The solid mask is
// the reference mask, or in 3-class mode the voxels of the solid class. μ_s
// is the peak of the solid voxels' histogram. In reference mode the fluid
// histogram then holds only bulk pore voxels (b <= BulkFraction), so the
// threshold is not pulled by the mixed voxels either. (Common practice in
// spirit — partial-volume models are standard in CT; this exact form is
// ours.)
//
// # Local-fluid passes (3-class mode)
//
// The 3-class solid threshold lies between brine and rock, i.e. at the 50 %
// blurred-solid level only where the rock touches brine; where it touches
// the nonwetting phase it cuts at b = (t_s − μ_n)/(μ_s − μ_n) ≈ 0.7, so rock
// edge voxels at oil contacts are called pore (16 700 true solid voxels of
// the 128³ pack at CNR 5) and become a false brine skin. With
// PartialVolume.LocalFluid = k, k passes follow the plain one. Each takes
// the labels of the previous pass, blurs the nonwetting and the wetting
// indicators with the PSF (the voxel's own weight removed) to a_n and a_w,
// forms the local fluid grey m = (a_n·μ_n + a_w·μ_w)/(a_n + a_w), and calls
// a voxel solid when its filtered grey is nearer μ_s than m: for a local
// two-phase mixture v = b·μ_s + (1 − b)·m this is b ≥ 0.5, the level at
// which the voxel centre lies on the solid side of a straight edge blurred by
// a symmetric PSF. It then redoes the partial-volume correction with that
// mask. μ_n, μ_w (and μ_s) are the peaks of the three classes of the merged
// histogram (Thresholds.NonwettingGrey, WettingGrey); with the passes on the
// corrected fluid grey is split at (μ_n + μ_w)/2 (Ridler–Calvard's fixed
// point for equal spreads), not at the 3-class Otsu threshold, which the
// mixed voxels pull towards the brine (20000 vs 19040 on the pack at CNR 5,
// which had bulk brine voxels called oil). The idea is the partial-volume
// mixture view of Santago & Gage (1993, IEEE Trans. Med. Imaging 12:566):
// a boundary voxel is a mixture of the two pure classes on either side; the
// use of a PSF-weighted neighbour fluid to pick that pair is ours. Each pass
// reads labels and solid mask within one blur radius each, so it adds
// 2·PVHalo() to the halo.
//
// One pass removes most of the false skin (true solid called pore 16 700 →
// 5 100 at CNR 5) and leaves S_w nearly unbiased; a second pass moves the
// solid edge further at mixed-fluid corners, which brings the w–n area to
// the target but calls some brine corner voxels solid (pore called solid
// 4 300 → 6 600 → 7 500), so S_w falls below the truth. Neither meets all
// three targets; measured on two rocks below.
//
// # Seeded watershed (default assignment)
//
// With the nonwetting phase darkest and the rock brightest, the blurred
// edge between them passes through the brine grey: the thresholds call a
// one-voxel shell wetting on every nonwetting–solid contact (a false skin;
// it doubles the w–n area and hides the contact line). Params.Assign
// "watershed" (default) decides such voxels by where their grey came from,
// without the point-spread function. It follows the marker-controlled
// watershed (Beucher & Meyer 1993, "The morphological approach to
// segmentation: the watershed transformation", in Mathematical Morphology
// in Image Processing, ch. 12), which Schlüter, Sheppard, Brown &
// Wildenschild (2014, Water Resour. Res. 50:3615) rank among the best
// segmentations for multiphase micro-CT, on the edge-weighted voxel graph
// (Cousty, Bertrand, Najman & Couprie 2009, IEEE PAMI 31:1362):
//
//   - Seeds: voxels whose face neighbours all have their threshold class
//     (a one-voxel erosion of each class; neighbours outside the sample
//     or, in reference mode, outside the mask's pore space do not count).
//     The false skin is about one voxel thick, so it holds no seeds, and
//     neither do the voxels on either side of it.
//   - Edge weights: |f(u) − f(v)| for face neighbours u, v of the filtered
//     grey f: the gradient magnitude along the edge.
//   - Every other voxel u takes the class k whose seeds reach it at least
//     cost over a path of at most K = Watershed.Steps face moves through
//     unseeded voxels; with Cost "sum" (default) a path costs the sum of
//     its edge weights (the grey-weighted distance of the image foresting
//     transform, Falcão, Stolfi & Lotufo 2004, IEEE PAMI 26:19), with
//     "max" its highest edge (the watershed's flooding level). Ties keep
//     the voxel's threshold class, else the darker class; a voxel no seed
//     reaches keeps its threshold class. A skin voxel of grey v between a
//     nonwetting neighbour of grey a and a solid one of grey b thus joins
//     the side with the smaller step |v − a| or |v − b|.
//
// K synchronous rounds over the box compute it exactly: round r holds, for
// every class, the least cost over paths of at most r moves (min–plus and
// min–max are monotone), each value from the same float32 operations
// whatever the box. Tile-local: every voxel of such a path lies within
// Chebyshev distance K of u, and the seed test of a path voxel reads its
// face neighbours, so a tile needs the classes of K + 1 more voxels around
// the region it decides; errors from the edge of a box reach at most one
// voxel inwards per round. Halo + K + 1.
//
// The classes come from the filtered grey as before, and the watershed then
// needs the filtered values themselves: uint8/uint16 with the median take
// filter.Median3Rows instead of the threshold-decomposition path (same
// labels before the flood, tested).
//
// Choices, measured (128³ pack of "Accuracy" below, seed 1, CNR 5,
// 3-class, median; NLM in brackets): cost "sum" against "max" at K = 5:
// pore 96.91 % (97.45) vs 95.80 % (96.23), ΔS_w −0.0047 (−0.0068) vs
// −0.0067 (−0.0068), ΔA_wn −3.3 % (−6.7) vs −1.0 % (−3.6): "max" keeps
// more interface but calls 1.1 % more pore voxels wrong. K with "sum":
// 2 → 96.51 %, ΔA_wn −23.3 %; 3 → 96.85 %, −14.2 %; 4 → 96.94 %, −7.5 %
// (NLM −11.6 %); 5 → 96.91 %, −3.3 % (NLM −6.7 %); 6 → 96.88 %, −0.5 %;
// 8 → 96.85 %, +2.2 %. Small K leaves wide false-skin bands to the
// thresholds; larger K lets brine run further along grain walls, which is
// right in the drained pack (corner films) and wrong under sessile caps
// (see "Contact lines": there the angle error grows with K, 60° cap with
// the median −2.1° at K = 2, −7.3° at 3, −10.3° at 4, −10.7° at 5).
// Default K = 4: it meets |ΔA_wn| ≤ 10 % with the default median, and its
// halo (+5) still fits the 32-voxel tiles of small campaigns (K = 5 made
// the demo's halo 32). Seeds that also ignore a nonwetting neighbour of a
// solid voxel (and the reverse) changed the pack by less than 0.01 % and
// were dropped.
//
// Wall pass (Watershed.Wall, off by default): a second flood on the labels
// of the first, whose seed test does not count a solid neighbour of a fluid
// voxel (or the reverse) as different, so that fluid voxels on the rock,
// whose grey the rock's blur raises (the nonwetting ones to about the
// brine threshold), seed their own phase and the contact line is decided
// along the wall. It doubles the watershed halo. At K = 4 it brings the
// sessile caps closer (60°/90°/120°, error with NLM −2.7/−12.9/−26.6° →
// 0.0/−5.8/−18.6°, with the median −10.3/−23.9/−29.0° → −5.5/−17.2/−24.8°)
// but loses brine in grain corners on the pack (ΔA_wn −7.5 % → −16.6 %
// with the median, −11.6 % → −22.2 % with NLM).
//
// Reference mode: the flood runs on the pore voxels (the mask's solid is
// fixed). Without partial-volume correction it nearly removes the need for
// one (seed 1, CNR 5: pore 96.36 → 98.65 %, ΔS_w +0.0245 → −0.0027, ΔA_wn
// +79 → +2.4 %); on top of the correction with the true PSF it cost a
// little (98.85 → 98.58 %, ΔS_w −0.0062 → −0.0096, ΔA_wn −5.1 → −10.4 %),
// so the accuracy tests of the corrected variants set Assign "threshold".
//
// # Doped brine: solid-layer passes
//
// With the solid between the fluids in grey order (Order "nsw": brine
// doped to be the brightest phase; or "wsn") the blurred edge between the
// two fluids passes through the solid grey, and the threshold classes put
// a one- or two-voxel solid layer on every nonwetting–wetting interface.
// The watershed alone keeps most of it: the layer touches the grains at
// every contact line, and the solid seeds of the grains flood along it
// cheaply (its voxels share about the same grey). Measured on the drainage
// scenes of pkg/scan (96³, CNR 5 with the undoped adjacent contrasts and
// noise, PSF σ 0.7) at S_n 0.49: ΔA_wn −75 %, pore voxels 90.2 %.
//
// Two passes (solidLayers, watershed.go) remove most of it. A solid voxel
// whose solid run along one of the 13 lattice directions is at most
// SolidLayerWidth = 4 voxel widths long (4 voxels along an axis, 2 along a
// diagonal) and ends in the two fluids (one at each end) is taken for the
// blurred edge and goes to the fluid whose grey (of the voxel at that end)
// is nearer its own. The pass runs on the threshold classes before the
// flood (so the layer does not seed or carry solid) and on the flood's
// labels after it, where, in addition, a solid voxel next to one fluid
// only whose grey lies beyond the middle of the solid class towards the
// other fluid goes to that other fluid (a mixture of the solid and its
// fluid neighbour cannot be there; it holds some of the other fluid — a
// brine film against the rock). Measured (same scene, first version with
// a reach of k voxels on either side in every direction): without passes
// ΔA_wn −75.5 %, after the flood only −31.0 % (k 2) and −25.1 % (k 3),
// with the fluid-neighbour rule −20.1 %, with the pass before the flood
// too −9.9 % (pore 95.12 %; undoped 95.05 %, −9.6 %). That reach took the
// rims off small grains (runs of 5 voxels along body diagonals, 8.7 voxel
// widths): on a fine-grained rock (grains 8 voxels across, PSF σ 1) 231 000
// of 532 000 solid voxels were called fluid, hence the run length in voxel
// widths (see SolidLayerWidth for the choice). Each pass reads labels
// within SolidLayerReach = 4, so the watershed halo grows by
// 2·SolidLayerReach; the result stays exact under tiling
// (TestWatershedTiling, order nsw). Solid plates of up to 4 voxels between
// the two fluids are lost. Per step, doped scans are then about as
// accurate as undoped ones in pore voxels and S_w but read the w–n area
// lower (pkg/scan TestFloat32AndDopedBrine: worst |ΔA_wn| 25.4 % against
// 14.7 %); with campaign thresholds they are worse (|ΔS_w| 0.032 at S_n
// 0.70: thin brine against the rock blurs to the solid grey and the
// campaign's w|s midpoint calls it solid, where per-step Otsu sits
// lower). Sessile caps with the contact-angle wall gap: within 2.7° of the
// labels (TestContactAngleFloatAndDoped); without the gap the doped scans
// read 10–19° high on the drained rocks (TestIssue15Table).
//
// # Contact lines
//
// Sessile nonwetting caps of 60°, 90° and 120° on a plate (96³, CNR 5,
// TestContactAngleOnGreyCaps) read, by the contact-angle estimator of
// pkg/contact, 60.0/91.1/121.3° on their true labels. Threshold assignment:
// no contact line on the 60° cap (the false skin covers the plate), 10°
// and 21° on the others. Watershed (defaults): median 49.8/67.2/92.3°,
// Gaussian 41.9/50.5/65.5°, NLM 57.3/78.3/94.7°. Samples now exist, but the
// angles are biased low, beyond issue 15's 3° except for the 60° cap with
// NLM. Where from: the estimator moves by 12–18° when the first fluid layer
// on the plate loses one voxel of nonwetting at the contact line (tried on
// the true labels); that layer sits where the PSF mixes all three phases,
// the rock raises its grey (nonwetting there reads about the brine
// threshold), and the 3×3×3 median and the Gaussian, whose windows hold
// nine rock voxels, pull it further towards the rock. Even without noise
// (CNR 100, no filter, K = 3) the 120° cap reads 110° with the wall pass;
// with the median 93°. Not solved here.
//
// # Bounded hysteresis
//
// With t the threshold bounding the nonwetting class and Band = β, the seeds
// are the voxels on the nonwetting side of t by more than β (t − β for a dark
// nonwetting phase) and the band voxels those of the nonwetting or the
// neighbouring class within β of t. A band voxel becomes nonwetting when a
// path of at most Steps = K face-neighbour moves through band voxels joins
// it to a seed; other band voxels take the neighbouring class. Classic
// hysteresis (unbounded growth) is not tile-local; bounding the path length
// makes it so: every voxel of such a path lies within Chebyshev distance K
// of the voxel decided, so a tile needs K more voxels of classified image
// around the region it must decide.
//
// # Island removal
//
// 26-connected nonwetting components of fewer than m = MinIsland voxels
// become wetting. A tile decides for the components that meet its core by
// labelling components inside the core grown by g = m − 1 (clipped to the
// scan) and removing those with fewer than m voxels there. This equals the
// whole-volume decision: if the component stays inside the grown box, the
// tile sees all of it; if it leaves it (through a side that is not the scan
// edge), it holds a 26-connected path from a core voxel to a voxel at
// Chebyshev distance g + 1 from the core, hence at least g + 1 = m voxels
// within the grown box — the tile keeps it, and so does the whole volume,
// whose component is larger still.
//
// # Halo
//
// Halo() = filter halo (median 1; Gaussian int(4σ + 0.5); NLM patch + search
// radius) + partial-volume radius R = int(4·Blur + 0.5) times
// (1 + 2·LocalFluid) + watershed K + 1 (twice with the wall pass) +
// hysteresis Steps + (MinIsland − 1). Segment works outwards-in on nested
// boxes: the filter output covers the box the partial-volume blur needs,
// which covers the box the watershed needs, which covers the box hysteresis
// needs, which covers the box island removal needs (the core grown by
// MinIsland − 1). All filters clamp at the edge of the grey box
// (scipy mode 'nearest'), which for a tile cut with the full halo is the edge
// of the scan, so the tile result equals the whole-volume result bit for bit
// (checked with 1, 8 and 27 tiles, every stage on, two local-fluid passes
// in 3-class mode, each watershed cost, with and without the wall pass).
//
// # Integer grey without a float copy
//
// With Assign "threshold", uint8 and uint16 tiles with the median (or no)
// filter are never converted to float32 as a whole (the watershed needs
// the filtered values, see above). With the median, Segment only compares the median
// with fixed grey levels (the class thresholds and, with hysteresis, the
// band edges tn ± band; for integer v, v > t ⇔ v > ⌊t⌋), so it asks
// filter.Median3Levels how many of those levels each median exceeds —
// threshold decomposition (Fitch, Coyle & Gallagher 1984): a count of the
// voxels above each level over the 3×3×3 window, no sorting — and labels
// row by row on the filter's goroutines. Without a filter a table maps each
// grey value to its class. Histogram bins the exact integer median
// (filter.Median3Rows) converted to float32 over the core only. All paths
// give the labels of the float32 path bit for bit (tested on uint16 against
// its float32 conversion, every stage on in turn, and with 1/8/27 tiles).
// Partial-volume correction, Gaussian and NLM still run on float32.
//
// # Accuracy on forward-model scans
//
// TestAccuracyForwardModel renders the demo's rock at 128³ — a cemented
// grain pack (synth.GrainPack via scenario.Campaign defaults: porosity 0.28,
// mean grain radius 18 voxels, pore bodies ~10–14 voxels across), no
// cylinder, drained by full morphology (Hilpert & Miller 2001) to step 5 of
// 10 (seed 1: S_w 0.438) — with pkg/forward (n 14000, w 24000, s 40000,
// Gaussian PSF σ 0.7 voxel, uint16) at CNR = |μ_w − μ_n|/σ_noise of 3, 5 and
// 10, and scores the labels against the truth: pore = fraction of true pore
// voxels with the right label; ΔS_w = S_w(segmented) − S_w(true); ΔA_wn =
// relative error of the w–n interfacial area as sluice reports it
// (pkg/measure: 13-direction Crofton areas, A_wn = (S_w + S_n − S_s)/2, on
// both the truth and the segmented labels). NLM: patch 3³, search 5³,
// h = 0.8σ with the true σ; island removal at 8 voxels (27 changed nothing:
// no spurious islands survive NLM); hysteresis off (a band of ±0.1 of the
// w–n contrast moved seed 2 from 98.13 % / −0.0082 / −8.3 % to 97.65 % /
// −0.0197 / −14.6 %). "scan mask": the reference mask segmented from a
// rendered brine-saturated reference scan of the same rock at CNR 20 (a
// long exposure, same PSF), unfiltered (its noise is 1/16 of the half
// contrast; a 3×3×3 median tripled the pore voxels called solid by rounding
// pore corners) and thresholded at the Ridler–Calvard midpoint; it calls
// 0.4 % of the pore voxels solid. "ideal mask": the true solid. Measured:
//
//	CNR  method                    pore %   ΔS_w     ΔA_wn % (Crofton)
//	 3   median 3-class            95.26   +0.0422  +114.5
//	 3   nlm 3-class + pv          97.06   +0.0139   +81.6
//	 3   nlm 3-class + pv + lf1    97.04   −0.0003   +31.5
//	 3   nlm 3-class + pv + lf2    97.05   −0.0077    +6.3
//	 3   nlm ref + pv, scan mask   98.57   −0.0061    −2.5
//	 3   nlm ref + pv, ideal mask  99.01   −0.0038    −2.9
//	 3   median 3-class ws         96.47   −0.0047    −4.1
//	 3   nlm 3-class ws            96.71   −0.0109   −13.4
//	 3   nlm ref ws, scan mask     98.41   −0.0032    +3.7
//	 5   median 3-class            95.67   +0.0364  +107.0
//	 5   nlm 3-class + pv          97.82   +0.0122   +74.7
//	 5   nlm 3-class + pv + lf1    97.97   −0.0037   +16.1
//	 5   nlm 3-class + pv + lf2    97.85   −0.0096    −5.3
//	 5   nlm ref + pv, scan mask   98.85   −0.0062    −5.1
//	 5   nlm ref + pv, ideal mask  99.29   −0.0039    −5.6
//	 5   median 3-class ws         96.94   −0.0064    −7.5
//	 5   nlm 3-class ws            97.45   −0.0090   −11.6
//	 5   nlm ref ws, scan mask     98.65   −0.0027    +2.4
//	10   median 3-class            95.77   +0.0334  +104.1
//	10   nlm 3-class + pv          98.35   +0.0121   +71.1
//	10   nlm 3-class + pv + lf1    98.62   −0.0052    +5.8
//	10   nlm 3-class + pv + lf2    98.48   −0.0090    −9.4
//	10   nlm ref + pv, scan mask   99.07   −0.0060    −6.2
//	10   nlm ref + pv, ideal mask  99.51   −0.0037    −6.6
//	10   median 3-class ws         97.27   −0.0081    −8.2
//	10   nlm 3-class ws            98.01   −0.0082   −10.1
//	10   nlm ref ws, scan mask     98.87   −0.0028    +1.2
//
// ("lf1", "lf2": PartialVolume.LocalFluid 1 or 2; "ws": the default
// watershed assignment, no partial-volume correction, no PSF needed; the
// other rows use Assign "threshold".)
//
// Per-phase confusion, median 3-class at CNR 5 (rows the truth, columns the
// labels solid / wetting / nonwetting), threshold → watershed:
//
//	solid       1 486 851   22 099        6  →  1 500 713    7 532      711
//	wetting         8 150  248 067    1 606  →     11 550  242 495    3 778
//	nonwetting          0   15 688  314 685  →        160    2 529  327 684
//
// The false brine skin (solid and nonwetting called wetting: 37 800
// voxels) falls to 10 100; brine called rock or oil rises from 9 800 to
// 15 300, mostly one-voxel corner films with no seed of their own.
//
// The targets (≥ 98 % of pore voxels, |ΔS_w| ≤ 0.01, |ΔA_wn| ≤ 10 % at CNR 5
// with the edge-preserving filter) are asserted in reference mode with the
// scan mask (and the ideal mask) on two rocks: seed 1 above, and seed 2
// (step 5, S_w 0.287; TestAccuracyOtherScenes) 98.13 %, −0.0082, −8.3 % —
// met, with little margin on that rock. With ring streaks (σ 300 grey) and
// a 5 % drift along z added to the seed-1 fast scan at 96³
// (TestAccuracyWithArtefacts): 97.93 %, −0.0084, −6.3 % (only pore ≥ 95 %
// asserted).
//
// Where the remaining reference-mode errors are (seed 1, 96³, CNR 5, ideal
// mask): of ~3100 wrong pore voxels, ~1370 lie within one voxel of the
// solid (blurred solid fraction b > 0.2; 1250 of them wetting called
// nonwetting), ~1360 in the next layer and ~370 in the bulk. The brine that
// drainage leaves in grain-contact corners is often one or two voxels
// thick; the PSF mixes it with the oil grey beside it, which the
// partial-volume model (uniform fluid around the voxel) cannot undo. So the
// segmented S_w is slightly low and the w–n area, which runs along those
// corners, 3–8 % low. Without a denoiser the same layer errs alike (it is
// the blur, not the filter); the errors shrink as pores widen (96³ → 128³
// of the same pack: 98.00 → 98.85 %).
//
// Single-scan 3-class mode with the watershed (default, no PSF): with the
// median, seed 1 meets |ΔS_w| ≤ 0.01 and |ΔA_wn| ≤ 10 % at CNR 3, 5 and
// 10 (table), pore voxels 96.5–97.3 %; NLM misses the area target by a
// little (−10…−13 %); on seed 2 (NLM, CNR 5) 96.19 %, −0.0158, −18.4 % —
// neither target met there. In reference mode the watershed without
// correction meets all three targets on seed 1 at CNR 5 and 10 (98.65 %,
// −0.0027, +2.4 % at CNR 5); on seed 2 97.70 %, −0.0013, +2.7 % (pore
// target missed).
//
// Single-scan 3-class mode with threshold assignment. Without local-fluid
// passes it misses the targets at every CNR: where the nonwetting phase touches the rock the PSF
// makes a shell of voxels whose grey passes through the brine band, and the
// 3-class solid mask (cut at b ≈ 0.7 at oil contacts) leaves rock edge
// voxels in it, so nonwetting bodies get a false brine skin (+71…+115 % w–n
// area, S_w too high). Local-fluid passes remove most of it (above). On the
// second rock (seed 2, S_w 0.287, CNR 5): lf1 97.03 %, −0.0019, +18.3 %;
// lf2 96.90 %, −0.0143, −8.9 %. Asserted at CNR 5 on both rocks: lf1 meets
// |ΔS_w| <= 0.01, lf2 meets |ΔA_wn| <= 10 %; pore ≥ 96.5 % and the other
// error are bounds, not targets. The 98 % pore target is not met in
// single-scan mode on seed 2 (97.0 %); the remaining pore errors are brine
// voxels in concave grain corners whose blurred solid fraction is ≥ 0.5
// (called solid) and oil/brine confusion in the first pore layer, i.e. the
// resolution limit of a σ = 0.7 voxel PSF on 10–14 voxel pores. Use
// reference mode for fluid maps; single-scan mode with LocalFluid 1 gives
// saturations, with 2 interfacial areas, each within target on these scenes.
package segment
