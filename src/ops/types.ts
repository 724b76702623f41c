/**
 * The analytic (mean-field) rules of one layer family: how a layer changes the second moment of the tensor going
 * forward and of the gradient coming back, the element shape and exact-zero mass of what it produces, and the
 * ledger line that explains the change. The magnitude engine (src/magnitude) strings these together over a graph.
 *
 * All second moments are E[x²] over every element (zeros included), averaged over initialisations and data: the
 * mean-field quantity q of Poole et al. 2016. The finite-width spread is carried separately as the variance of
 * ln(squared norm) (SCIENCE.md §2.6).
 */
import type { GraphLayer, GraphWeight } from "../graph/types.js";
import type { ActivationName } from "../spec/types.js";
import type { MixtureField } from "../numeric/gated-mixture.js";

/** Same strings as ElementShape in src/magnitude/types.ts (ops may not import magnitude). */
export type OpElementShape = "gaussian" | "half-gaussian" | "uniform" | "constant" | "bounded" | "log-normal" | "gaussian-mixture";

/** A "gaussian-mixture" gradient's mixture: DerivativeMixture of src/magnitude/types.ts, one layout (src/numeric/gated-mixture.ts). */
export type OpMixture = MixtureField;

/** Tail family of a tensor's elements beyond its shape, for element maxima. */
export type TailKind = "gaussian" | "product";

/** The forward moments of one tensor. */
export interface Signal {
  /** E[x²] over all elements (zeros included) */
  q: number;
  /** E[x] over all elements */
  mean: number;
  zeroFraction: number;
  shape: OpElementShape;
  /** largest magnitude an element can take (bounded activations, probabilities) */
  bound?: number;
  /** log-normal shape: standard deviation of log2|x| across elements */
  elementLog2Spread?: number;
  /** variance over draws of ln(squared norm) (finite-width spread, Hanin & Nica 2019) */
  logVar: number;
  /** heavier-than-Gaussian tails (a product of two Gaussians in a gated layer) */
  tail?: TailKind;
  /**
   * set by a weight layer on its output: the width whose random matrix made it, and the κ already counted for it
   * (κ = 2 for a linear map); a following activation replaces that κ by its own (SCIENCE.md §2.6)
   */
  fresh?: {
    width: number;
    kappa: number;
    /**
     * Var/E² over the weights' draw of one unit's (channel's) sum of squares over the batch × positions terms, where
     * it differs from κ (a convolution's channel sums many patches of few inputs: about 2/fan_in). Set by conv2d
     */
    unitKappa?: number;
    /** the pairs of terms each unit sums, where a unit sums many (a convolution's channel): see UnitPairs */
    unit?: UnitPairs;
  };
  /** whether the tensor is roughly zero-mean Gaussian (the input assumption of the activation rules) */
  gaussian: boolean;
  /**
   * the part of q that every sample of a batch shares: the square of each feature's mean over the batch, averaged
   * over features (a ReLU output's positive mean, passed on by the next weights). Batch norm removes it, which is
   * where its gradient growth comes from (Yang et al. 2019). Absent: the elementwise mean², the usual case.
   */
  shared?: number;
  /**
   * correlation E[x_p·x_p']/E[x²] between two positions (tokens, pixels) of one sample, same feature. Absent: the
   * cross-sample correlation (a part every sample shares is shared by the positions of one sample too).
   */
  positionCorrelation?: number;
  /**
   * images only: the part of q that is the square of each channel's mean over batch and pixels (what a batch norm
   * removes), averaged over channels. Below `shared` when the pixels' batch means differ (a zero-padded convolution
   * gives its border pixels fewer taps of a nonzero-mean input). Absent: `shared`. Set by conv2d only
   */
  channelShared?: number;
  /**
   * set by a ReLU or leaky ReLU on an input with channelShared, for a batch norm right after it: each channel's
   * variance depends on where its mean sits (see ChannelSpread). Absent: every channel's variance taken as their mean
   */
  channelSpread?: ChannelSpread;
  /**
   * E[c²] over pairs of samples, c = x_n·x_m/(‖x_n‖·‖x_m‖) the cosine of two samples' feature vectors (one position
   * per sample): shared/q is its mean, and a narrow random map's finite width spreads it (Fisher 1915), which the batch
   * rms of a following linear map feels. Absent: unknown (set from the input, carried by dense layers, activations and
   * residual sums)
   */
  correlationSquare?: number;
  /**
   * variance over draws of ln of the shared part (the batch mean's square), where it differs from logVar: a narrow
   * linear map's batch mean is one Gaussian per unit (Var/E² = 2/width) while its batch rms averages over the samples.
   * Absent: logVar
   */
  sharedLogVar?: number;
  /**
   * share of features that are exactly zero at every one of the batch × positions terms of a step (a ReLU unit off
   * for the whole batch): rows and columns of a weight gradient that are exactly zero
   */
  allZero?: number;
  /**
   * E[Cov(x_i, x_j)²]/q² for two different features of one sample (covariance over the data, the weights fixed): the
   * outputs of a random linear map share its inputs, 1/fan_in of it. The loss's curvature sums E[x xᵀ] into the next
   * weight gradient, whose off-diagonal adds (fan_in − 1) times this. Absent: 0 (carried through dense layers,
   * pointwise activations, layer and RMS norms, dropout and attention, and residual blocks whose branch holds only the
   * first five)
   */
  featureCovariance?: number;
  /**
   * D·E[tr Σ_s²]/E[tr Σ_s]² − 1 for Σ_s the covariance of the deviations from a sequence's mean over the positions of
   * one sequence s (src/ops/sequence-excess.ts): two positions of one sequence have E[(x̃_j·x̃_j')²] = D·E[x̃²]²·(1 + ε),
   * which the query gradient of attention without a causal mask reads. Absent: what featureCovariance gives for the
   * deviations (carried through dense layers, layer and RMS norms, gated feed-forward layers, attention and residual
   * sums, on inputs with positions)
   */
  sequenceExcess?: number;
  /**
   * set by a gated feed-forward layer on its output: the share of its deviations' energy that is, to first order, a map
   * of its input's deviations of mean zero over the weights (each sequence's own), which a residual sum right above
   * reads (src/ops/sequence-excess.ts summedExcess). Absent: 0
   */
  sequenceLinear?: number;
  /**
   * set by a leaky ReLU on a zero-mean Gaussian input: its negative slope and the input's second moment, so that a
   * max-pool reads max φ(x) = φ(max x) (φ increasing) instead of taking the output as a Gaussian
   */
  rectifier?: { slope: number; preQ: number };
}

/** A max pool's windows over a rectifier's output whose channels' means differ: see Gradient.windowGate. */
export interface WindowGate {
  off: number;
  bothOnSamples: number;
  bothOnPositions: number;
}

/**
 * A rectifier's per-channel input: the channel's mean μ_c ~ N(0, between) over channels (a convolution of a
 * nonzero-mean input), the spread `within` about it, and the negative-side slope (0 for a ReLU).
 */
export interface ChannelSpread {
  slope: number;
  /** E[μ_c²], averaged over channels */
  between: number;
  /** the input's variance about its channel's mean, E[x²] − E[μ_c²] */
  within: number;
  /** E[y²] of the rectifier's output it describes: a layer that changes the tensor leaves it to no one */
  q: number;
  /** correlation of the input's deviations from its channel's mean between two positions of one sample */
  position: number;
  /** the κ per channel the rectifier counted in logVar (its channel sums' Var/E²) and the channels, where it counted one */
  unit?: { kappa: number; width: number };
}

/**
 * The T = batch × positions terms t that one unit of a random map sums (a convolution's channel, the same weights at
 * every pixel), by their pairs: the unit's sum over them of f(w·p_t) has Var/E² = (1/T)·g(1) + Σ over pairs of g(c),
 * g(c) = Cov(f(u), f(v))/E[f]² at the pair's cosine c (own algebra). Pairs of one sample and of two samples form a class
 * each: its share of the T² ordered pairs, the mean cosine and the cosine's standard deviation over the pairs.
 */
export interface UnitPairs {
  /** 1/T */
  single: number;
  same: PairClass;
  other: PairClass;
}

export interface PairClass {
  share: number;
  mean: number;
  deviation: number;
}

/** The backward moments of one gradient tensor. */
export interface Gradient {
  /** E[δ²] over all elements (zeros included) */
  q: number;
  zeroFraction: number;
  shape: OpElementShape;
  logVar: number;
  elementLog2Spread?: number;
  bound?: number;
  /** shape "gaussian-mixture": the activation derivative that scales the Gaussian δ */
  mixture?: OpMixture;
  /** set by a transposed weight map: the width it produced and the κ counted, for the next activation to replace */
  fresh?: { width: number; kappa: number; unit?: UnitPairs };
  /** as Signal.sharedLogVar: variance over draws of ln of the part the samples share, where it differs from logVar */
  sharedLogVar?: number;
  /** as Signal.correlationSquare: E[c²] of two samples' gradient vectors' cosine (one position per sample) */
  cosineSquare?: number;
  /**
   * how much of the network output's own draw-to-draw spread this gradient's scale carries: e = d ln E[δ²]/d ln ‖y‖²
   * of the loss seed, and the output's ln-variance not yet met again by the transposed maps below (`budget`). Set by
   * the loss seed, carried by dense layers and pointwise activations only
   */
  coupling?: { elasticity: number; budget: number };
  /**
   * E[δ_n·δ_m] for two different samples of the batch (elementwise, averaged): the part of the gradient the samples
   * share. It makes the weight gradient's batch sum partly coherent. Absent: 0.
   */
  shared?: number;
  /** as Signal.positionCorrelation, for the gradient */
  positionCorrelation?: number;
  /**
   * E[δ·δ']/q for two different samples at two different positions (one feature): absent, the sample correlation (what
   * samples share is taken as shared at every position, as a forward signal's mean is). Flatten's backward sets 0: its
   * positions were different features of the layer after it, whose independent weights leave them nothing in common
   * across samples but the same feature; maps that keep positions apart (convolutions, pools, activations) keep it.
   */
  crossCorrelation?: number;
  /** as Signal.allZero: share of features whose gradient is exactly zero at every term (a ReLU off for the whole batch) */
  allZero?: number;
  /**
   * set by max-pool's backward: every nonzero element sits at the arg-max of a window of this many inputs, so a
   * rectifier just before the pool sees the derivative at the window's maximum, not at a random element
   */
  windowMaximum?: number;
  /**
   * set with windowMaximum where the pool worked it out from its input's channel means (a rectifier on a convolution of
   * a nonzero-mean input, whose channels sit apart): the chance that all k inputs of a window are off, and that the
   * maxima of two windows of one channel are both on, in two samples and in one. Absent: those of independent inputs
   */
  windowGate?: WindowGate;
  /**
   * set by max-pool's backward, or by a ReLU or leaky ReLU with no max pool above it where the loss's curvature is not
   * carried, and kept by the positively homogeneous activations below a max pool (ReLU, leaky ReLU): E[S²]
   * of S = Σ over batch and positions of z·δ for one channel, z the tensor this gradient belongs to. Σ y·δ_y = Σ p·g
   * at the pool's output (Euler's theorem, φ(y) = y·φ'(y); the arg-max routing moves g to a pixel equal to p), and a
   * layer y = w·x below gets S·w/‖w‖² in its weight gradient: the routed pixels are where x lines up with w
   */
  homogeneousSum?: number;
  /**
   * set by the loss at the start of the horizon and kept while every layer between this tensor z and the loss is
   * positively homogeneous of degree 1 (dense and convolution layers with zero biases, ReLU, leaky ReLU, max and average
   * pools, dropout, flatten): E[Σ over batch and every unit of z·δ], which Euler's theorem makes the same at each such
   * layer, Σ y·∂L/∂y at the network's output y, N·E[yᵀ·M·y] = N·q_y·tr M by Stein's lemma (M the loss's curvature, see
   * Curvature). A channel's homogeneous sum S holds its share, 1/channels, which is read squared: the cross-entropy
   * seed gives the root of the sum's mean square over draws (the logit variance log-normal over them), the squared-error
   * seed its value at the median draw
   */
  eulerSum?: number;
  /**
   * a squared-error head of k outputs per row (a sample, or a sample's position) scales every element of its row by the
   * row's residual norm: once a transposed weight map has spread the row's k residuals over many features, each element
   * is Gaussian given that norm, a scale mixture over √(χ²_k/k) (src/numeric/gated-mixture.ts rowMixture). `rowsPending`
   * k where no such map has yet (the residuals themselves are i.i.d. Gaussian elements), `rows` k below one
   */
  rows?: number;
  rowsPending?: number;
  /** the rows per micro-batch (batch × positions at the loss) */
  rowCount?: number;
  /**
   * set by a ReLU's backward rule on the gradient it passes down: the sample, position and cross (two samples at two
   * positions) correlations of the gradient before its gate. The layer just below (a norm whose output the ReLU gates) sums x·relu'(x)·b = relu(x)·b, whose
   * pairs share E[relu(x)relu(x')], not E[x x']·E[relu'relu']
   */
  reluGated?: { sample: number; position: number; cross: number };
  /**
   * set by a batch norm's backward on the gradient it passes to the rectifier whose channels it normalises (Signal.
   * channelSpread), each channel weighed by its gain²/(var_c + ε): E[φ'²], which that rectifier uses in place of its own
   * (a channel whose mean sits low has both a small variance and few units on), E[φ'φ'] of two samples and of two
   * positions of one sample, and the part
   * of the gated gradient's sum over one channel's batch × pixels, per unit of N·E[(φ'·δ)²], that the norm's x̂ term
   * takes (it pairs the gate with x̂), which the pairs of two samples below it lose
   */
  channelGate?: { derivativeSecond: number; pair: number; positionPair: number; correction: number };
  /**
   * at the start of the horizon, where the labels are independent of the inputs: the loss's expected Gauss–Newton
   * matrix in this tensor's features (set by the loss, carried down through linear layers and pointwise activations).
   * A layer's gradient then holds its own output through it, so its weight gradient has a part that is the same in
   * every micro-batch (see {@link Curvature})
   */
  curvature?: Curvature;
}

/**
 * Statistics of M = E_t[Jᵀ·∂²L/∂z²·J], the expected Gauss–Newton matrix of the loss in one sample's features, over the
 * draw of the weights. With δ = ∂L/∂y ≈ M·y + (what does not depend on the layer), a layer y = W·x sums
 * N·E[δ·xᵀ] = N·M·W·E[x xᵀ] into its weight gradient in every micro-batch (Stein's lemma: E[f(z)·x] = E[∇f]·Cov(z, x)
 * for Gaussian z): a per-element second moment N²·E[x²]²·var_w·rowSquares.
 */
export interface Curvature {
  /** E[M_ii]; below a smooth unit with E[φ·φ''] > 0 the Hessian's, not Gauss–Newton's (src/ops/activation/analytic.ts) */
  diagonal: number;
  /** E[M_ii²] */
  diagonalSquare: number;
  /** E[Σ_j M_ij²], the diagonal's square included */
  rowSquares: number;
  /** M·1 = 0, every row summing to zero (a layer norm's centring): M holds nothing of a mean its input shares over features */
  centred?: boolean;
  /**
   * M is the cross-entropy loss's own (set by its seed, dropped by every pullback), p − y being M·z only to first order:
   * the dense layer right below takes no pair of two samples' Wᵀ·M·W·x from it (src/ops/dense/analytic.ts)
   */
  seed?: boolean;
  /**
   * set by a dense layer that handed on two samples' pair of Wᵀ·M·W·x (the `shared` of its input gradient holds it):
   * the activation right below then takes its own unit's pair as the difference from what its gate made of that
   * (src/ops/activation/analytic.ts selfPair); dropped by every pullback
   */
  paired?: boolean;
  /**
   * of that pair, the part along each sample's own input x (Wᵀ·M·W·x holds E[Wᵀ·M·W]·x = v·tr M·x): v²·E[(tr M)²]·E[x_a·x_b],
   * which a norm's projection off its own output direction removes (src/ops/norm/analytic.ts); dropped by every pullback
   */
  alignedPair?: number;
  /**
   * set once a norm's response (M − ρ·(tr M/n)·I, not a Gauss–Newton matrix) lies between this tensor and the loss: M
   * may then have negative eigenvalues, and a positive semidefinite matrix's bounds do not hold for it
   */
  indefinite?: boolean;
  /**
   * the part of M that a residual branch's seed adds for its skip, A = (α·q_x/q_F)·M·J̄ᵀ, which is not symmetric
   * (tr A² ≈ 0 next to ‖A‖², J̄'s entries of mean zero): its share of `rowSquares` and of `diagonalSquare`, and
   * `covariance`, E_i[Cov(z_i, g_i)²] of a unit's forward value z_i with the skip's part g of its gradient (g linear
   * in the block's input x), from which a pointwise unit's gradient mean follows by Stein's lemma. Carried by dense
   * layers and pointwise activations; any other layer drops it (its M is then taken as symmetric)
   */
  skip?: { rowSquares: number; diagonalSquare: number; covariance: number };
  /**
   * E[(J·h)²]/E[y²] of the layers between this tensor h and the loss (> 1 where saturating activations in a chaotic
   * stack grow a perturbation faster than the output they produce); absent: 1. The self parts read off M assume the
   * output is J·h (exact for positively homogeneous layers); where it is not, y's share along J·h is at most |y|/|J·h|
   * (Cauchy–Schwarz), so the statistics above are already scaled by min(1, 1/tangentExcess) (own algebra). The first
   * activation above h sees the tangent as its own input (φ'(u)·u against φ(u)); those further up are taken as seeing
   * it independent of their input, by the mean-field rule (χ against the output's gain), whose product is
   * `tangentAbove`. Dense layers and pointwise maps carry it, a residual sum whose branch it can follow works it out
   * for its input (blockMarks); norms, flattens, attention and other residual sums build a new matrix, below which it
   * starts again at 1 (src/ops/common.ts keepMarks)
   */
  tangentExcess?: number;
  /** the product of E[φ'²]·E[u²]/E[φ²] over the activations between this tensor and the loss; absent: 1 */
  tangentAbove?: number;
  /**
   * E[y·(J·h)]/E[y²], the part of the tangent that is the output itself, set where residual sums lie between this
   * tensor and the loss (each keeps only the part of its sum's tangent along the sum: src/ops/residual/analytic.ts);
   * absent: 1. y's share along J·h is then at most along²/tangentExcess, by which the statistics above are scaled
   */
  tangentAlong?: number;
}


/** Ledger wording, built only when someone reads the ledger (formatting numbers for every layer is costly). */
export type Text = string | (() => string);

/** One multiplicative step, for the ledger: the second moment goes from `before` to `before·ratio`. */
export interface Factor {
  /** ratio of second moments per element (zeros included) */
  ratio: number;
  /** the rule in words with its numbers, e.g. "dense: fan_in·var_w = 1.000" */
  rule: Text;
  /** the published source of the rule */
  source: string;
}

/** Activation moments at one input variance (SCIENCE.md §2.9), as the numeric module defines them. */
export interface ActivationMoments {
  mean: number;
  second: number;
  derivativeMean: number;
  derivativeSecond: number;
  fourth: number;
  derivativeFourth: number;
  zeroFraction: number;
}

/** What a rule may ask of the engine. */
export interface OpContext {
  /** samples per step on one worker */
  batch: number;
  /** "start": at initialisation; "end": at the end of the training horizon */
  phase: "start" | "end";
  /**
   * whether this phase keeps a ledger. Without one (the end pass) nothing reads a rule's wording, so a rule may give
   * NO_FACTORS and "" for its factors, hazard details and weight-gradient rules instead of making them as garbage
   */
  ledger: boolean;
  /**
   * whether this phase words its hazard details (the start pass, whose sites are reported); the ledger factors are
   * left to `ledger`, which the start pass sets only when a ledger is read (src/magnitude/predict.ts)
   */
  details: boolean;
  /** variance of one element of a weight in this phase (initial variance × growth² at the end) */
  variance(weight: GraphWeight): number;
  /** memoised Gaussian expectations of an activation at input variance q */
  moments(name: ActivationName, q: number, slope: number): ActivationMoments;
  /**
   * records the dense, convolution and pointwise rules fill in place of new result, hazard and moments objects, for a
   * caller that reads each rule's result (its hazards and their inputs, its weight gradients) before it calls the next
   * rule and keeps none of them (src/magnitude/predict.ts); absent: every one is a new object, as a caller that keeps a
   * rule's results needs
   */
  ruleRecords?: RuleRecords;
}

/**
 * See OpContext.ruleRecords: one forward accumulation, a backward weight sum and transposed sum, the dense and
 * convolution rules' weight and bias gradient moments with their two lists ([weight], [weight, bias]), and the rules'
 * result objects
 */
export interface RuleRecords {
  readonly accumulation: OpHazard[];
  readonly sums: OpHazard[];
  readonly weight: WeightGradientMoment;
  readonly bias: WeightGradientMoment;
  readonly weightOnly: WeightGradientMoment[];
  readonly weightAndBias: WeightGradientMoment[];
  /** the dense, convolution and pointwise rules' results (forwardInto), a linear and a pointwise backward result */
  readonly forward: ForwardResult;
  readonly linearBackward: BackwardResult;
  readonly pointwiseBackward: BackwardResult;
}

/** A tensor inside a layer besides its output (attention logits, the gated product...). */
export interface InnerTensor {
  /** id suffix, e.g. "logits" -> `<layer>/pre-activation:logits` */
  suffix: string;
  role: "activation" | "pre-activation";
  /** full shape of one step, batch first */
  shape: number[];
  elements: number;
  signal: Signal;
  /** factors from the layer's input to this tensor (NO_FACTORS without a ledger) */
  factors: readonly Factor[];
}

/** A gradient tensor inside a layer (of an inner tensor). */
export interface InnerGradient {
  suffix: string;
  shape: number[];
  elements: number;
  gradient: Gradient;
  /** factors from the gradient at the layer's output to this one (NO_FACTORS without a ledger) */
  factors: readonly Factor[];
}

/** An operation hazard a rule reports (turned into a HazardSite by the engine). */
export interface OpHazard {
  kind: "softmax-exp" | "norm-sum-of-squares" | "accumulation";
  /** what goes into the operation (a backward rule's sums: the gradient's products, scaled by the loss scale as gradients are) */
  input: Signal | Gradient;
  inputElements: number;
  /** what comes out, when it differs from the input (an accumulated sum) */
  output?: Signal | Gradient;
  outputElements?: number;
  terms: number;
  guarded: boolean;
  detail: Text;
  /**
   * a backward rule's sums only: the gradient the sum makes, as the end of its tensor id: "input" (the gradient at the
   * layer's input, which the engine leaves out below the network's input, where no gradient is computed),
   * "weight-gradient" or "weight-gradient:<name>" (a weight's gradient summed over batch × positions in one
   * micro-batch: the engine takes that gradient's profile as the sum's), or "activation-gradient:<suffix>" (an inner
   * gradient)
   */
  makes?: string;
  /** a norm's statistics, each with a spread of its own: see HazardSite.statistics */
  statistics?: { dof: number; ownLogVar: number };
}

/** Forward result of one layer. */
export interface ForwardResult<Stash = unknown> {
  output: Signal;
  /** factors from input to output, for the ledger (one or more; NO_FACTORS without a ledger) */
  factors: readonly Factor[];
  /** the output's role: weight layers give pre-activations */
  role: "activation" | "pre-activation";
  inner: InnerTensor[];
  hazards: OpHazard[];
  /** whatever the backward rule needs */
  stash: Stash;
}

/** Per-element second moment of one weight's gradient, summed over batch and positions. */
export interface WeightGradientMoment {
  /** GraphWeight.name */
  weight: string;
  /** incoherent sum: N·E[x²]·E[δ²] (independent signs) */
  q: number;
  /** coherent sum: N²·E[x²]·E[δ²] (all terms aligned), the upper bracket (SCIENCE.md §2.1) */
  coherentQ: number;
  /**
   * the part of `q` that is the same in every micro-batch (the loss's curvature through the layer's own weights, see
   * {@link Curvature}): micro-batches and workers add it coherently; absent: 0
   */
  alignedQ?: number;
  /**
   * E[S·S'] for the sums of two different micro-batches: the pairs of samples across them share what two samples of one
   * batch share, so micro-batches and workers add it coherently as well; absent: 0
   */
  betweenQ?: number;
  /** terms summed per element (batch × positions) */
  terms: number;
  zeroFraction: number;
  logVar: number;
  /** the rule in words */
  rule: Text;
}

/** Backward result of one layer. */
export interface BackwardResult {
  /** gradient at the layer's input; absent for the first layer on token input (no gradient for ids) */
  input?: Gradient;
  factors: readonly Factor[];
  inner: InnerGradient[];
  weightGradients: WeightGradientMoment[];
  /** the backward products and batch sums accumulated in the accumulate format (each with `makes`); absent: none */
  hazards?: OpHazard[];
}

/** Extra inputs for composite layers: the residual add gets its branch's output (forward) or input gradient. */
export interface BranchResults {
  branchOutput?: Signal;
  branchGradient?: Gradient;
  /** whether a norm inside the branch resets the scale (the branch output no longer tracks the skip's norm) */
  branchResets?: boolean;
  /** the forward stash of each branch layer, in order (for a rule that follows the branch's mean Jacobian) */
  branchStashes?: readonly unknown[];
}

/** The analytic rules of one layer family. */
export interface AnalyticRule<Stash = unknown> {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal, branch: BranchResults): ForwardResult<Stash>;
  backward(ctx: OpContext, layer: GraphLayer, stash: Stash, output: Gradient, branch: BranchResults): BackwardResult;
}
