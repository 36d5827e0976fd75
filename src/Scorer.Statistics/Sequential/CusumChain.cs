namespace Scorer.Statistics.Sequential;

/// <summary>
/// The Markov-chain approximation of Brook &amp; Evans (1972), as Steiner et al. (2000) use it, for one risk-adjusted
/// CUSUM chart and one sample of predicted probabilities. The sample's p values are grouped (identical values share
/// their weights) once, so that many thresholds can be evaluated cheaply.
/// </summary>
/// <remarks>
/// Discretisation (the convention of tests/reference/calibration/statistics.py): [0, h) is cut into M intervals of
/// width w = h/M; state j stands for [jw, (j + 1)w) and is represented by its midpoint c_j = (j + ½)w. The chart starts
/// in state 0, which also holds the atom at S = 0. From state j an observation with weight W moves to
/// s = max(0, c_j + W), i.e. to state floor(s / w) if that is &lt; M, and otherwise out of the chart (a signal).
/// Every weight is at most max|W| in size, so Q is a band matrix with b ≈ max|W|/w + 2 diagonals on each side; it is
/// built in O(n + M·b) and solved on the band only, so one evaluation costs O(n + M·b²) instead of O(M·n + M³).
/// </remarks>
internal sealed class CusumChain
{
    private readonly double[] _probability; // distinct p values, ascending
    private readonly double[] _share;       // count of each distinct value / n
    private readonly double[] _weight0;     // W for y = 0
    private readonly double[] _weight1;     // W for y = 1
    private readonly double _largestUp;     // max(0, max W)
    private readonly double _largestDown;   // max(0, −min W)

    /// <param name="probabilities">Validated probabilities (non-empty, each in [0, 1]).</param>
    /// <param name="chartOddsRatio">A validated chart odds ratio.</param>
    public CusumChain(ReadOnlySpan<double> probabilities, double chartOddsRatio)
    {
        var sorted = probabilities.ToArray();
        Array.Sort(sorted);
        var distinct = new List<double>();
        var counts = new List<int>();
        foreach (var p in sorted)
        {
            if (distinct.Count > 0 && distinct[^1] == p)
            {
                counts[^1]++;
            }
            else
            {
                distinct.Add(p);
                counts.Add(1);
            }
        }

        _probability = [.. distinct];
        _share = new double[distinct.Count];
        _weight0 = new double[distinct.Count];
        _weight1 = new double[distinct.Count];
        for (var i = 0; i < distinct.Count; i++)
        {
            _share[i] = counts[i] / (double)probabilities.Length;
            _weight0[i] = RiskAdjustedCusum.WeightUnchecked(distinct[i], 0, chartOddsRatio);
            _weight1[i] = RiskAdjustedCusum.WeightUnchecked(distinct[i], 1, chartOddsRatio);
            _largestUp = Math.Max(_largestUp, Math.Max(_weight0[i], _weight1[i]));
            _largestDown = Math.Max(_largestDown, -Math.Min(_weight0[i], _weight1[i]));
        }
    }

    /// <summary>The event probability under a true odds ratio R: R·p / (1 − p + R·p), and exactly p when R = 1.</summary>
    public static double EventProbability(double p, double trueOddsRatio) =>
        trueOddsRatio == 1.0 ? p : trueOddsRatio * p / (1.0 + (trueOddsRatio - 1.0) * p);

    /// <summary>The ARL from state 0 (the chart's start and its state after every reset).</summary>
    public double AverageRunLength(double threshold, double trueOddsRatio, int states) =>
        Transitions(threshold, trueOddsRatio, states).RunLengths()[0];

    /// <summary>The transient part Q of the chain's transition matrix, for the chart with threshold h when the true
    /// odds ratio is <paramref name="trueOddsRatio"/>.</summary>
    /// <remarks>
    /// From state j a weight W leads to state floor(max(0, (j + ½)w + W) / w). Without the clamp at 0 and the exit at
    /// M that is j + d with d = floor(W/w + ½), the same offset for every row, so the masses are first summed by
    /// offset (O(n)) and then laid along the band (O(M·b)): offsets with j + d ≤ 0 go to state 0 and those with
    /// j + d ≥ M leave the chart. (Rounding could place a weight within ~1e-13 of a bin edge differently from the
    /// row-by-row evaluation; the reference cases show no such difference.)
    /// </remarks>
    public BandMatrix Transitions(double threshold, double trueOddsRatio, int states)
    {
        var w = threshold / states;
        var upper = Bandwidth(_largestUp / w, states);
        var lower = Bandwidth(_largestDown / w, states);

        // offsetMass[lower + d]: the probability of a move by d states (−lower ≤ d ≤ upper).
        var offsetMass = new double[lower + upper + 1];
        for (var i = 0; i < _probability.Length; i++)
        {
            var eventProbability = EventProbability(_probability[i], trueOddsRatio);
            AddMass(offsetMass, _weight1[i], w, lower, upper, eventProbability * _share[i]);
            AddMass(offsetMass, _weight0[i], w, lower, upper, (1.0 - eventProbability) * _share[i]);
        }

        var q = new BandMatrix(states, lower, upper);
        var values = q.Values;
        for (var j = 0; j < states; j++)
        {
            var rowOrigin = q.Index(j, 0);
            for (var d = -lower; d <= upper; d++)
            {
                var mass = offsetMass[lower + d];
                var k = j + d;
                if (mass == 0.0 || k >= states)
                {
                    continue;
                }

                values[rowOrigin + Math.Max(k, 0)] += mass; // k ≤ 0: S was clamped at 0, i.e. state 0
            }
        }

        return q;
    }

    /// <summary>Adds a weight's mass at its move d = floor(W/w + ½) (in states). The band is wide enough for every
    /// move unless it was capped at M − 1: then a larger upward move signals from every state (it is dropped) and a
    /// larger downward move reaches 0 from every state (it is put at −(M − 1)).</summary>
    private static void AddMass(double[] offsetMass, double weight, double w, int lower, int upper, double mass)
    {
        var d = Math.Floor((weight / w) + 0.5);
        if (d > upper)
        {
            return;
        }

        offsetMass[lower + (d < -lower ? -lower : (int)d)] += mass;
    }

    /// <summary>Diagonals needed on one side for moves up to <paramref name="jumpInStates"/> widths: the jump rounded
    /// up, plus the ½ of the rounding to a state, plus a spare one; at most M − 1.</summary>
    private static int Bandwidth(double jumpInStates, int states) =>
        jumpInStates + 2.0 >= states - 1 ? states - 1 : (int)Math.Ceiling(jumpInStates) + 2;
}

/// <summary>
/// A square matrix stored by its band: entry (i, k) with −Lower ≤ k − i ≤ Upper lives at i·(Lower + Upper + 1) +
/// Lower + (k − i); entries outside the band are zero. Used for the CUSUM chain's Q.
/// </summary>
internal sealed class BandMatrix
{
    public BandMatrix(int size, int lower, int upper)
    {
        Size = size;
        Lower = lower;
        Upper = upper;
        Width = lower + upper + 1;
        Values = new double[size * Width];
    }

    public int Size { get; }

    public int Lower { get; }

    public int Upper { get; }

    public int Width { get; }

    public double[] Values { get; }

    /// <summary>The storage index of (row, column); only meaningful for columns inside the row's band, but also used
    /// as a row origin (column 0), to which the column is added.</summary>
    public int Index(int row, int column) => row * Width + Lower + column - row;

    /// <summary>
    /// x = (I − Q)⁻¹·1, the expected number of observations to a signal from each state (the signalling observation
    /// included). I − Q is an M-matrix and weakly diagonally dominant by rows (Q ≥ 0 with row sums ≤ 1), so Gaussian
    /// elimination without pivoting is stable and keeps the band. A pivot that is not positive means a set of states
    /// from which the chart cannot signal: every element is then +∞.
    /// </summary>
    public double[] RunLengths()
    {
        var n = Size;
        var width = Width;
        var lower = Lower;
        var upper = Upper;
        var a = new double[Values.Length];
        for (var i = 0; i < a.Length; i++)
        {
            a[i] = -Values[i];
        }

        for (var i = 0; i < n; i++)
        {
            a[(i * width) + lower] += 1.0;
        }

        var x = new double[n];
        Array.Fill(x, 1.0);
        for (var k = 0; k < n; k++)
        {
            var kOrigin = Index(k, 0);
            var pivot = a[kOrigin + k];
            if (!(pivot > 0.0))
            {
                Array.Fill(x, double.PositiveInfinity);
                return x;
            }

            var lastRow = Math.Min(n - 1, k + lower);
            var lastColumn = Math.Min(n - 1, k + upper);
            for (var i = k + 1; i <= lastRow; i++)
            {
                var iOrigin = Index(i, 0);
                var factor = a[iOrigin + k] / pivot;
                if (factor == 0.0)
                {
                    continue;
                }

                a[iOrigin + k] = 0.0;
                for (var c = k + 1; c <= lastColumn; c++)
                {
                    a[iOrigin + c] -= factor * a[kOrigin + c];
                }

                x[i] -= factor * x[k];
            }
        }

        for (var i = n - 1; i >= 0; i--)
        {
            var origin = Index(i, 0);
            var sum = x[i];
            var lastColumn = Math.Min(n - 1, i + upper);
            for (var c = i + 1; c <= lastColumn; c++)
            {
                sum -= a[origin + c] * x[c];
            }

            x[i] = sum / a[origin + i];
        }

        return x;
    }

    /// <summary>to = from·Q (a distribution over the states one observation later, before any reset).</summary>
    public void Propagate(ReadOnlySpan<double> from, Span<double> to)
    {
        to.Clear();
        for (var j = 0; j < Size; j++)
        {
            var mass = from[j];
            if (mass == 0.0)
            {
                continue;
            }

            var origin = Index(j, 0);
            var first = Math.Max(0, j - Lower);
            var last = Math.Min(Size - 1, j + Upper);
            for (var k = first; k <= last; k++)
            {
                to[k] += mass * Values[origin + k];
            }
        }
    }
}
