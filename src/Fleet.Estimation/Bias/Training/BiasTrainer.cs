using System.Diagnostics;
using System.Numerics.Tensors;
using Fleet.Estimation.Filtering;

namespace Fleet.Estimation.Bias.Training;

/// <summary>
/// Trains a <see cref="BiasNetwork"/> on TDOA samples with Adam (Kingma &amp; Ba 2015) on a robust loss of the TDOA
/// residual, with early stopping on a validation set that holds out whole anchor layouts (groups).
/// <para>
/// Per epoch: shuffle, mini-batches, Adam steps; the robust residual scale σ = 1.4826·MAD of the training residuals is
/// re-estimated after each epoch (IRLS-style) and the loss threshold is c = k·σ, so NLOS samples, far out in the
/// residual distribution, teach the model little. Gross outliers can also be screened out beforehand.
/// </para>
/// <para>
/// Determinism: every random choice comes from <see cref="BiasTrainerOptions.Seed"/>; each batch is split into a fixed
/// number of chunks whose gradients are summed in a fixed order, so results are bit-identical for a seed whatever the
/// thread count. Backpropagation runs in double; the returned network is float32.
/// </para>
/// </summary>
public static class BiasTrainer
{
    /// <summary>Gradient chunks per batch (fixed so the reduction order never changes).</summary>
    private const int ChunkCount = 2;

    private const int EvaluationChunk = 512;

    /// <summary>1/Φ⁻¹(0.75): MAD → standard deviation at the normal (CHECKS.md §2).</summary>
    private const double MadToSigma = 1.482602218505602;

    /// <summary>Trains a model; throws <see cref="ArgumentException"/> for empty or non-finite input or bad options.</summary>
    /// <param name="samples">Training samples from one or more layouts (groups).</param>
    /// <param name="options">Settings; null takes the defaults.</param>
    /// <param name="progress">Called once per epoch (from the training thread).</param>
    /// <param name="cancellationToken">Checked between batches.</param>
    public static BiasTrainingResult Train(IReadOnlyList<TdoaTrainingSample> samples, BiasTrainerOptions? options = null,
        IProgress<TrainingProgress>? progress = null, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(samples);
        options ??= new BiasTrainerOptions();
        ValidateOptions(options);
        var stopwatch = Stopwatch.StartNew();
        var n = samples.Count;
        if (n < 2)
        {
            throw new ArgumentException($"need at least 2 training samples, got {n}", nameof(samples));
        }

        var featureCount = LinkFeatures.CountFor(options.FeatureSet);
        var rawFeatures = new float[n * 2 * featureCount];
        var targets = new double[n];
        for (var q = 0; q < n; q++)
        {
            var s = samples[q];
            if (!double.IsFinite(s.Target) || !s.TagPosition.IsFinite || !double.IsFinite(s.RobotYaw))
            {
                throw new ArgumentException($"sample {q} (group '{s.Group}', robot '{s.Robot}', t = {s.Time}) has a non-finite value", nameof(samples));
            }

            LinkFeatures.Write(s.Map, s.AnchorA, s.TagPosition, s.RobotYaw, options.FeatureSet, rawFeatures.AsSpan(2 * q * featureCount, featureCount));
            LinkFeatures.Write(s.Map, s.AnchorB, s.TagPosition, s.RobotYaw, options.FeatureSet, rawFeatures.AsSpan(((2 * q) + 1) * featureCount, featureCount));
            targets[q] = s.Target;
        }

        // Screening of gross outliers, from the median and MAD of all targets.
        var screened = new bool[n];
        var screenedCount = 0;
        if (options.OutlierScreenSigmas is { } screenSigmas && screenSigmas > 0)
        {
            var median = Median(targets);
            var limit = screenSigmas * Math.Max(MadToSigma * MedianAbsoluteDeviation(targets, median), options.MinimumResidualScale);
            for (var q = 0; q < n; q++)
            {
                if (Math.Abs(targets[q] - median) > limit)
                {
                    screened[q] = true;
                    screenedCount++;
                }
            }
        }

        var (isValidation, splitKind) = Split(samples, options);
        var trainList = new List<int>(n);
        var trainMetricList = new List<int>(n);
        var validationList = new List<int>();
        for (var q = 0; q < n; q++)
        {
            if (isValidation[q])
            {
                if (!screened[q])
                {
                    validationList.Add(q);
                }

                continue;
            }

            if (!screened[q] || !options.DropScreenedSamples)
            {
                trainList.Add(q);
            }

            if (!screened[q])
            {
                trainMetricList.Add(q);
            }
        }

        var trainIndices = trainList.ToArray();
        var validationIndices = validationList.ToArray();
        if (trainIndices.Length == 0)
        {
            throw new ArgumentException("no training samples left after the validation split and screening", nameof(samples));
        }

        // Input normalisation and output scale from the training set.
        var mean = new float[featureCount];
        var std = new float[featureCount];
        ComputeNormalisation(rawFeatures, trainIndices, featureCount, mean, std);
        var trainTargets = new double[trainIndices.Length];
        for (var k = 0; k < trainIndices.Length; k++)
        {
            trainTargets[k] = targets[trainIndices[k]];
        }

        var outputScale = (float)Math.Max(MadToSigma * MedianAbsoluteDeviation(trainTargets, Median(trainTargets)), options.MinimumResidualScale);

        var features = new double[rawFeatures.Length];
        for (var row = 0; row < 2 * n; row++)
        {
            for (var i = 0; i < featureCount; i++)
            {
                var index = (row * featureCount) + i;
                features[index] = ((double)rawFeatures[index] - mean[i]) / std[i];
            }
        }

        // Initialisation: Glorot uniform for tanh and the linear output layer, He normal for SiLU hidden layers.
        var layerSizes = new int[options.HiddenWidths.Count + 2];
        layerSizes[0] = featureCount;
        for (var l = 0; l < options.HiddenWidths.Count; l++)
        {
            layerSizes[l + 1] = options.HiddenWidths[l];
        }

        layerSizes[^1] = 1;
        var chunkCapacity = (options.BatchSize + ChunkCount - 1) / ChunkCount;
        var kernels = new MlpTrainingKernel[ChunkCount];
        for (var c = 0; c < ChunkCount; c++)
        {
            kernels[c] = new MlpTrainingKernel(layerSizes, options.Activation, chunkCapacity);
        }

        var evaluator = new MlpTrainingKernel(layerSizes, options.Activation, EvaluationChunk);
        var parameterCount = kernels[0].ParameterCount;
        var theta = new double[parameterCount];
        InitialiseParameters(theta, layerSizes, options.Activation, kernels[0], new Random(options.Seed));

        var lossKernel = options.Loss;
        var tuning = options.LossTuning ?? TrainingLoss.DefaultTuning(lossKernel);
        var residuals = new double[n];
        var scratch = new double[Math.Max(trainIndices.Length, EvaluationChunk)];
        EvaluateResiduals(evaluator, theta, features, trainIndices, targets, outputScale, residuals, scratch);
        var sigma = ResidualScale(residuals, trainIndices, scratch, options.MinimumResidualScale);

        var hasValidation = validationIndices.Length > 0;
        var best = (double[])theta.Clone();
        var bestEpoch = 0;
        var bestValidation = hasValidation
            ? ValidationErrors(evaluator, theta, features, validationIndices, targets, outputScale, residuals, scratch).Robust
            : double.NaN;

        var adam = new AdamOptimizer(parameterCount, options.LearningRate, options.Beta1, options.Beta2, options.Epsilon);
        var gradients = new double[ChunkCount][];
        for (var c = 0; c < ChunkCount; c++)
        {
            gradients[c] = new double[parameterCount];
        }

        var chunkLosses = new double[ChunkCount];
        var shuffle = new Random(unchecked(options.Seed * 7919) + 17);
        var parallel = new ParallelOptions { MaxDegreeOfParallelism = options.MaxDegreeOfParallelism, CancellationToken = cancellationToken };
        var epochsRun = 0;
        var stoppedEarly = false;
        for (var epoch = 1; epoch <= options.MaxEpochs; epoch++)
        {
            cancellationToken.ThrowIfCancellationRequested();
            epochsRun = epoch;
            Shuffle(trainIndices, shuffle);
            var loss = new TrainingLoss(lossKernel, tuning * sigma);
            var epochLoss = 0.0;
            for (var start = 0; start < trainIndices.Length; start += options.BatchSize)
            {
                cancellationToken.ThrowIfCancellationRequested();
                var batchLength = Math.Min(options.BatchSize, trainIndices.Length - start);
                var perChunk = (batchLength + ChunkCount - 1) / ChunkCount;
                var batchStart = start;
                void RunChunk(int c)
                {
                    var chunkStart = Math.Min(c * perChunk, batchLength);
                    var chunkLength = Math.Min(perChunk, batchLength - chunkStart);
                    Array.Clear(gradients[c]);
                    chunkLosses[c] = kernels[c].AccumulateGradient(theta, features, trainIndices.AsSpan(batchStart + chunkStart, chunkLength),
                        targets, outputScale, loss, gradients[c], residuals);
                }

                if (options.MaxDegreeOfParallelism > 1 && batchLength >= 64)
                {
                    Parallel.For(0, ChunkCount, parallel, RunChunk);
                }
                else
                {
                    for (var c = 0; c < ChunkCount; c++)
                    {
                        RunChunk(c);
                    }
                }

                var gradient = gradients[0];
                for (var c = 1; c < ChunkCount; c++)
                {
                    TensorPrimitives.Add(gradient, gradients[c], gradient);
                }

                TensorPrimitives.Multiply(gradient, 1.0 / batchLength, gradient);
                for (var c = 0; c < ChunkCount; c++)
                {
                    epochLoss += chunkLosses[c];
                }

                adam.Step(theta, gradient);
            }

            sigma = ResidualScale(residuals, trainIndices, scratch, options.MinimumResidualScale);
            var (validationRmse, validationRobust) = hasValidation
                ? ValidationErrors(evaluator, theta, features, validationIndices, targets, outputScale, residuals, scratch)
                : (double.NaN, double.NaN);
            if (!hasValidation || validationRobust < bestValidation)
            {
                bestValidation = validationRobust;
                bestEpoch = epoch;
                Array.Copy(theta, best, theta.Length);
            }

            progress?.Report(new TrainingProgress(epoch, options.MaxEpochs, epochLoss / trainIndices.Length, validationRmse, validationRobust, bestEpoch, bestValidation));
            if (hasValidation && epoch - bestEpoch >= options.Patience)
            {
                stoppedEarly = true;
                break;
            }
        }

        var parameters = new float[parameterCount];
        for (var i = 0; i < parameterCount; i++)
        {
            parameters[i] = (float)best[i];
        }

        var model = new BiasNetwork(options.FeatureSet, options.Activation, options.HiddenWidths, parameters, mean, std, outputScale);
        var trainMetric = trainMetricList.ToArray();
        var report = new TrainingReport
        {
            EpochsRun = epochsRun,
            BestEpoch = bestEpoch,
            StoppedEarly = stoppedEarly,
            TrainRmseBefore = RmseOf(targets, trainMetric, null, rawFeatures, featureCount),
            TrainRmseAfter = RmseOf(targets, trainMetric, model, rawFeatures, featureCount),
            ValidationRmseBefore = RmseOf(targets, validationIndices, null, rawFeatures, featureCount),
            ValidationRmseAfter = RmseOf(targets, validationIndices, model, rawFeatures, featureCount),
            ValidationRobustRmseBefore = RobustRmseOf(targets, validationIndices, null, rawFeatures, featureCount),
            ValidationRobustRmseAfter = RobustRmseOf(targets, validationIndices, model, rawFeatures, featureCount),
            ValidationSplit = splitKind,
            TrainingGroups = GroupsOf(samples, isValidation, false),
            ValidationGroups = GroupsOf(samples, isValidation, true),
            SampleCountsByGroup = samples.GroupBy(s => s.Group, StringComparer.Ordinal).OrderBy(g => g.Key, StringComparer.Ordinal)
                .ToDictionary(g => g.Key, g => g.Count(), StringComparer.Ordinal),
            Sites = samples.Select(s => s.Map.SiteId).Distinct(StringComparer.Ordinal).Order(StringComparer.Ordinal).ToArray(),
            TrainingSamples = trainIndices.Length,
            ValidationSamples = validationIndices.Length,
            ScreenedSamples = screenedCount,
            FinalResidualScale = sigma,
            Options = options,
            Duration = stopwatch.Elapsed,
        };
        return new BiasTrainingResult(model, report);
    }

    /// <summary>Median of a copy of <paramref name="values"/> (NaN for empty input).</summary>
    internal static double Median(ReadOnlySpan<double> values)
    {
        if (values.Length == 0)
        {
            return double.NaN;
        }

        var copy = values.ToArray();
        Array.Sort(copy);
        var middle = copy.Length / 2;
        return copy.Length % 2 == 1 ? copy[middle] : 0.5 * (copy[middle - 1] + copy[middle]);
    }

    private static double MedianAbsoluteDeviation(ReadOnlySpan<double> values, double median)
    {
        var deviations = new double[values.Length];
        for (var i = 0; i < values.Length; i++)
        {
            deviations[i] = Math.Abs(values[i] - median);
        }

        return Median(deviations);
    }

    private static void ValidateOptions(BiasTrainerOptions options)
    {
        if (options.HiddenWidths is null || options.HiddenWidths.Any(w => w <= 0))
        {
            throw new ArgumentException("hidden widths must be positive", nameof(options));
        }

        if (options.BatchSize < 1 || options.MaxEpochs < 0 || options.Patience < 1 || options.MaxDegreeOfParallelism < 1)
        {
            throw new ArgumentException("batch size, patience and parallelism must be ≥ 1 and max epochs ≥ 0", nameof(options));
        }

        if (!(options.ValidationFraction >= 0 && options.ValidationFraction <= 0.9))
        {
            throw new ArgumentException("validation fraction must be in [0, 0.9]", nameof(options));
        }

        if (!(options.MinimumResidualScale > 0) || options.LossTuning is <= 0)
        {
            throw new ArgumentException("minimum residual scale and loss tuning must be > 0", nameof(options));
        }
    }

    /// <summary>
    /// Marks validation samples: whole groups (layouts) when there are two or more; else whole robots; else contiguous
    /// time blocks (10 blocks by time order, every k-th held out).
    /// </summary>
    private static (bool[] IsValidation, ValidationSplitKind Kind) Split(IReadOnlyList<TdoaTrainingSample> samples, BiasTrainerOptions options)
    {
        var n = samples.Count;
        var isValidation = new bool[n];
        if (options.ValidationFraction <= 0 || n < 20)
        {
            return (isValidation, ValidationSplitKind.None);
        }

        var random = new Random(unchecked(options.Seed * 31) + 5);
        var groups = samples.Select(s => s.Group).Distinct(StringComparer.Ordinal).Order(StringComparer.Ordinal).ToArray();
        if (groups.Length >= 2)
        {
            HoldOutKeys(samples, s => s.Group, groups, random, options.ValidationFraction, isValidation);
            return (isValidation, ValidationSplitKind.WholeLayouts);
        }

        var robots = samples.Select(s => s.Robot).Distinct(StringComparer.Ordinal).Order(StringComparer.Ordinal).ToArray();
        if (robots.Length >= 2)
        {
            HoldOutKeys(samples, s => s.Robot, robots, random, options.ValidationFraction, isValidation);
            return (isValidation, ValidationSplitKind.WholeRobots);
        }

        const int blocks = 10;
        var held = Math.Clamp((int)Math.Round(options.ValidationFraction * blocks), 1, blocks - 1);
        var step = blocks / held;
        var order = Enumerable.Range(0, n).OrderBy(q => samples[q].Time).ThenBy(q => q).ToArray();
        for (var k = 0; k < n; k++)
        {
            var block = (int)((long)k * blocks / n);
            if (block % step == step - 1 && block / step < held)
            {
                isValidation[order[k]] = true;
            }
        }

        return (isValidation, ValidationSplitKind.TimeBlocks);
    }

    private static void HoldOutKeys(IReadOnlyList<TdoaTrainingSample> samples, Func<TdoaTrainingSample, string> key, string[] keys,
        Random random, double fraction, bool[] isValidation)
    {
        var counts = samples.GroupBy(key, StringComparer.Ordinal).ToDictionary(g => g.Key, g => g.Count(), StringComparer.Ordinal);
        var shuffled = (string[])keys.Clone();
        random.Shuffle(shuffled);
        var held = new HashSet<string>(StringComparer.Ordinal);
        var heldCount = 0;
        var wanted = fraction * samples.Count;
        foreach (var k in shuffled)
        {
            if (held.Count > 0 && (heldCount >= wanted || held.Count == keys.Length - 1))
            {
                break;
            }

            held.Add(k);
            heldCount += counts[k];
        }

        for (var q = 0; q < samples.Count; q++)
        {
            isValidation[q] = held.Contains(key(samples[q]));
        }
    }

    private static IReadOnlyList<string> GroupsOf(IReadOnlyList<TdoaTrainingSample> samples, bool[] isValidation, bool validation)
    {
        var set = new SortedSet<string>(StringComparer.Ordinal);
        for (var q = 0; q < samples.Count; q++)
        {
            if (isValidation[q] == validation)
            {
                set.Add(samples[q].Group);
            }
        }

        return set.ToArray();
    }

    private static void ComputeNormalisation(float[] raw, int[] indices, int featureCount, float[] mean, float[] std)
    {
        var sum = new double[featureCount];
        var sumSquares = new double[featureCount];
        foreach (var q in indices)
        {
            for (var link = 0; link < 2; link++)
            {
                var offset = ((2 * q) + link) * featureCount;
                for (var i = 0; i < featureCount; i++)
                {
                    sum[i] += raw[offset + i];
                }
            }
        }

        var rows = 2.0 * indices.Length;
        for (var i = 0; i < featureCount; i++)
        {
            mean[i] = (float)(sum[i] / rows);
        }

        foreach (var q in indices)
        {
            for (var link = 0; link < 2; link++)
            {
                var offset = ((2 * q) + link) * featureCount;
                for (var i = 0; i < featureCount; i++)
                {
                    var d = raw[offset + i] - (double)mean[i];
                    sumSquares[i] += d * d;
                }
            }
        }

        for (var i = 0; i < featureCount; i++)
        {
            var s = Math.Sqrt(sumSquares[i] / rows);

            // A (nearly) constant feature carries no information; dividing by ~0 would only amplify rounding.
            std[i] = s > 1e-6 ? (float)s : 1f;
        }
    }

    private static void InitialiseParameters(double[] theta, int[] sizes, BiasActivation activation, MlpTrainingKernel layout, Random random)
    {
        for (var l = 0; l < sizes.Length - 1; l++)
        {
            var (weights, _) = layout.LayerOffsets(l);
            var span = theta.AsSpan(weights, sizes[l] * sizes[l + 1]);
            var isOutput = l == sizes.Length - 2;
            if (activation == BiasActivation.SiLU && !isOutput)
            {
                WeightInitialization.HeNormal(span, sizes[l], random);
            }
            else
            {
                WeightInitialization.GlorotUniform(span, sizes[l], sizes[l + 1], random);
            }
        }
    }

    private static void Shuffle(int[] indices, Random random)
    {
        for (var i = indices.Length - 1; i > 0; i--)
        {
            var j = random.Next(i + 1);
            (indices[i], indices[j]) = (indices[j], indices[i]);
        }
    }

    private static void EvaluateResiduals(MlpTrainingKernel evaluator, double[] theta, double[] features, int[] indices, double[] targets,
        double outputScale, double[] residuals, double[] scratch)
    {
        for (var start = 0; start < indices.Length; start += EvaluationChunk)
        {
            var length = Math.Min(EvaluationChunk, indices.Length - start);
            var chunk = indices.AsSpan(start, length);
            evaluator.Predict(theta, features, chunk, outputScale, scratch.AsSpan(0, length));
            for (var k = 0; k < length; k++)
            {
                residuals[chunk[k]] = scratch[k] - targets[chunk[k]];
            }
        }
    }

    /// <summary>Validation RMSE and robust RMSE (1.4826·median |r|, insensitive to NLOS outliers; drives early stopping).</summary>
    private static (double Rmse, double Robust) ValidationErrors(MlpTrainingKernel evaluator, double[] theta, double[] features, int[] indices,
        double[] targets, double outputScale, double[] residuals, double[] scratch)
    {
        EvaluateResiduals(evaluator, theta, features, indices, targets, outputScale, residuals, scratch);
        var sum = 0.0;
        var absolute = new double[indices.Length];
        for (var k = 0; k < indices.Length; k++)
        {
            var r = residuals[indices[k]];
            sum += r * r;
            absolute[k] = Math.Abs(r);
        }

        return (Math.Sqrt(sum / indices.Length), MadToSigma * Median(absolute));
    }

    private static double ResidualScale(double[] residuals, int[] indices, double[] scratch, double floor)
    {
        var values = scratch.AsSpan(0, indices.Length);
        for (var k = 0; k < indices.Length; k++)
        {
            values[k] = residuals[indices[k]];
        }

        var median = Median(values);
        return Math.Max(MadToSigma * MedianAbsoluteDeviation(values, median), floor);
    }

    private static double RmseOf(double[] targets, int[] indices, BiasNetwork? model, float[] raw, int featureCount)
    {
        if (indices.Length == 0)
        {
            return double.NaN;
        }

        var sum = 0.0;
        foreach (var q in indices)
        {
            var residual = CorrectedResidual(targets, q, model, raw, featureCount);
            sum += residual * residual;
        }

        return Math.Sqrt(sum / indices.Length);
    }

    private static double RobustRmseOf(double[] targets, int[] indices, BiasNetwork? model, float[] raw, int featureCount)
    {
        var absolute = new double[indices.Length];
        for (var k = 0; k < indices.Length; k++)
        {
            absolute[k] = Math.Abs(CorrectedResidual(targets, indices[k], model, raw, featureCount));
        }

        return MadToSigma * Median(absolute);
    }

    /// <summary>Target minus the shipped model's TDOA bias (or the target itself without a model).</summary>
    private static double CorrectedResidual(double[] targets, int q, BiasNetwork? model, float[] raw, int featureCount)
    {
        var residual = targets[q];
        if (model is not null)
        {
            var (a, b) = model.EvaluatePair(raw.AsSpan(2 * q * featureCount, featureCount), raw.AsSpan(((2 * q) + 1) * featureCount, featureCount));
            residual -= (double)b - a;
        }

        return residual;
    }
}
