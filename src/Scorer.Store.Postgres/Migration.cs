namespace Scorer.Store.Postgres;

/// <summary>This driver's migrations (<c>Migrations/NNNN_name.sql</c>, embedded in this assembly).</summary>
internal static class Migration
{
    /// <summary>Every embedded migration, in version order; the versions run 1, 2, 3, … without gaps.</summary>
    public static IReadOnlyList<NumberedMigration> All { get; } = NumberedMigration.Load(typeof(Migration).Assembly);
}
