using System.Collections;
using System.Reflection;
using System.Text.RegularExpressions;
using Scorer.Host;

namespace Scorer.Server.Tests;

/// <summary>
/// Every setting a document, a proto comment, a code comment or a deployment file names (<c>Scorer:A:B</c>, or
/// <c>Scorer__A__B</c> as an environment variable) is one the service binds: a path through <see cref="ScorerOptions"/>'s
/// properties, where a list takes an index and a dictionary any key.
/// </summary>
public sealed partial class NamedSettingsTests
{
    [GeneratedRegex(@"Scorer(?::|__)[A-Za-z][A-Za-z0-9]*(?:(?::|__)(?:\{[^}\s]+\}|[A-Za-z0-9]+|…|\*))*")]
    private static partial Regex SettingName();

    private static readonly string[] Folders = ["docs", "protos", "src", "deploy", "bench", "scripts", "examples"];
    private static readonly string[] Extensions = [".md", ".proto", ".cs", ".yaml", ".yml", ".json", ".sh", ".js", ".html"];

    [Fact]
    public void Every_setting_named_anywhere_in_the_repository_exists()
    {
        var root = Scorer.Testing.TestRepository.Root;
        var files = Folders.SelectMany(f => Directory.EnumerateFiles(Path.Combine(root, f), "*", SearchOption.AllDirectories))
            .Append(Path.Combine(root, "README.md")).Append(Path.Combine(root, "DEVELOPERS.md"))
            .Where(f => Extensions.Contains(Path.GetExtension(f)) && !f.Contains($"{Path.DirectorySeparatorChar}bin{Path.DirectorySeparatorChar}", StringComparison.Ordinal)
                && !f.Contains($"{Path.DirectorySeparatorChar}obj{Path.DirectorySeparatorChar}", StringComparison.Ordinal)
                && !f.Contains($"{Path.DirectorySeparatorChar}node_modules{Path.DirectorySeparatorChar}", StringComparison.Ordinal));
        var unknown = new List<string>();
        var checkedNames = 0;
        foreach (var file in files)
        {
            var lines = File.ReadAllLines(file);
            for (var n = 0; n < lines.Length; n++)
            {
                foreach (Match m in SettingName().Matches(lines[n]))
                {
                    checkedNames++;
                    var parts = m.Value.Split([":", "__"], StringSplitOptions.None).Skip(1).ToList();
                    if (Resolve(typeof(ScorerOptions), parts) is { } problem)
                    {
                        unknown.Add($"{Path.GetRelativePath(root, file)}:{n + 1}: {m.Value} ({problem})");
                    }
                }
            }
        }

        Assert.True(checkedNames > 50, $"only {checkedNames} setting names found: the search is broken");
        Assert.True(unknown.Count == 0, "settings named that the service does not have:\n" + string.Join("\n", unknown));
    }

    [Fact]
    public void The_check_refuses_a_setting_that_does_not_exist()
    {
        Assert.NotNull(Resolve(typeof(ScorerOptions), ["Monitor", "Conflicts"]));
        Assert.NotNull(Resolve(typeof(ScorerOptions), ["Log", "Capacity"]));
        Assert.Null(Resolve(typeof(ScorerOptions), ["Outcomes", "Conflicts"]));
        Assert.Null(Resolve(typeof(ScorerOptions), ["Keys", "0", "Roles", "1"]));
        Assert.Null(Resolve(typeof(ScorerOptions), ["Monitor", "AucFloors", "{model}"]));
    }

    /// <summary>Null when the path names a bound setting (or a section of them); otherwise what is wrong.</summary>
    private static string? Resolve(Type type, IReadOnlyList<string> parts)
    {
        var current = type;
        for (var i = 0; i < parts.Count; i++)
        {
            var part = parts[i];
            if (part is "…" or "*")
            {
                return null; // "Scorer:Monitor:…": a whole section
            }

            if (Element(current) is { } element)
            {
                current = element; // an index or a key: anything goes
                continue;
            }

            var property = current.GetProperty(part, BindingFlags.Public | BindingFlags.Instance);
            if (property is null || !property.CanWrite)
            {
                return $"{current.Name} has no setting {part}";
            }

            current = Nullable.GetUnderlyingType(property.PropertyType) ?? property.PropertyType;
        }

        return null;
    }

    /// <summary>The element type of a list or the value type of a dictionary; null for anything else.</summary>
    private static Type? Element(Type type)
    {
        if (type == typeof(string) || !typeof(IEnumerable).IsAssignableFrom(type))
        {
            return null;
        }

        if (type.IsArray)
        {
            return type.GetElementType();
        }

        var args = type.GetGenericArguments();
        return args.Length switch
        {
            1 => args[0],
            2 => Nullable.GetUnderlyingType(args[1]) ?? args[1],
            _ => null,
        };
    }
}
