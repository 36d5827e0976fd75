using System.Runtime.CompilerServices;

namespace Scorer.Engine.Scoring;

public enum FeatureValueKind : byte
{
    Missing,
    Number,
    Text,
}

/// <summary>One value of a row as it arrives: a number, a text (a level), or missing. No allocation.</summary>
public readonly struct FeatureValue
{
    private readonly double _number;
    private readonly string? _text;

    private FeatureValue(FeatureValueKind kind, double number, string? text)
    {
        Kind = kind;
        _number = number;
        _text = text;
    }

    public FeatureValueKind Kind { get; }
    public double Number => _number;
    public string? Text => _text;

    public static FeatureValue Missing => default;

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static FeatureValue Of(double number) => new(FeatureValueKind.Number, number, null);

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static FeatureValue Of(string? text) => text is null ? default : new(FeatureValueKind.Text, double.NaN, text);

    public static implicit operator FeatureValue(double number) => Of(number);

    public static implicit operator FeatureValue(string? text) => Of(text);

    public override string ToString() => Kind switch
    {
        FeatureValueKind.Number => _number.ToString("R", System.Globalization.CultureInfo.InvariantCulture),
        FeatureValueKind.Text => _text!,
        _ => "(missing)",
    };
}

/// <summary>A feature value with the name it arrived under.</summary>
public readonly record struct NamedValue(string Name, FeatureValue Value);
