using System.Globalization;
using System.Reflection;

namespace Scorer.Store.Postgres;

/// <summary>One numbered schema migration: <c>Migrations/NNNN_name.sql</c>, embedded in this assembly.</summary>
internal sealed record Migration(int Version, string Name, string Sql)
{
    private const string Prefix = "Migrations/";

    /// <summary>Every embedded migration, in version order; the versions run 1, 2, 3, … without gaps.</summary>
    public static IReadOnlyList<Migration> All { get; } = Load();

    private static Migration[] Load()
    {
        var assembly = typeof(Migration).Assembly;
        var migrations = assembly.GetManifestResourceNames()
            .Where(name => name.StartsWith(Prefix, StringComparison.Ordinal) && name.EndsWith(".sql", StringComparison.Ordinal))
            .Select(name => Read(assembly, name))
            .OrderBy(m => m.Version)
            .ToArray();

        for (var i = 0; i < migrations.Length; i++)
        {
            if (migrations[i].Version != i + 1)
            {
                throw new InvalidOperationException(
                    $"Migration {migrations[i].Name} should be numbered {i + 1}: migrations are numbered 1, 2, 3, … with no gap or repeat.");
            }
        }

        return migrations;
    }

    private static Migration Read(Assembly assembly, string resourceName)
    {
        var fileName = resourceName[Prefix.Length..];
        var underscore = fileName.IndexOf('_', StringComparison.Ordinal);
        if (underscore <= 0 || !int.TryParse(fileName.AsSpan(0, underscore), NumberStyles.None, CultureInfo.InvariantCulture, out var version))
        {
            throw new InvalidOperationException($"Migration {fileName} should be named NNNN_name.sql.");
        }

        using var stream = assembly.GetManifestResourceStream(resourceName)
            ?? throw new InvalidOperationException($"Migration resource {resourceName} is missing.");
        using var reader = new StreamReader(stream);
        return new Migration(version, fileName, reader.ReadToEnd());
    }
}
