using System.Diagnostics.CodeAnalysis;
using Fleet.Grains.Registry;
using Google.Protobuf.WellKnownTypes;
using Google.Rpc;
using Grpc.Core;

namespace Fleet.Server.Grpc;

/// <summary>Canonical gRPC errors. Invalid arguments carry <c>google.rpc.BadRequest</c> field violations.</summary>
internal static class GrpcErrors
{
    public static RpcException InvalidArgument(IReadOnlyList<(string Field, string Description)> violations)
    {
        var badRequest = new BadRequest();
        foreach (var (field, description) in violations)
        {
            badRequest.FieldViolations.Add(new BadRequest.Types.FieldViolation { Field = field, Description = description });
        }

        var status = new Google.Rpc.Status
        {
            Code = (int)Code.InvalidArgument,
            Message = violations.Count == 1 ? $"{violations[0].Field}: {violations[0].Description}" : $"{violations.Count} invalid fields",
            Details = { Any.Pack(badRequest) },
        };
        return status.ToRpcException();
    }

    [DoesNotReturn]
    public static void ThrowInvalidArgument(string field, string description) => throw InvalidArgument([(field, description)]);

    [DoesNotReturn]
    public static void ThrowNotFound(string message) => throw new RpcException(new global::Grpc.Core.Status(StatusCode.NotFound, message));

    [DoesNotReturn]
    public static void ThrowFromRegistry(RegistryException e) => throw new RpcException(new global::Grpc.Core.Status(e.Error switch
    {
        RegistryError.NotFound => StatusCode.NotFound,
        RegistryError.AlreadyExists => StatusCode.AlreadyExists,
        _ => StatusCode.FailedPrecondition,
    }, e.Message));
}

/// <summary>Collects field violations of one request; <see cref="ThrowIfAny"/> raises INVALID_ARGUMENT with all of them.</summary>
internal sealed class Violations
{
    public const int MaxIdLength = 128;

    private List<(string Field, string Description)>? _items;

    public void Add(string field, string description) => (_items ??= []).Add((field, description));

    public void SiteId(string field, string value)
    {
        if (!FleetIds.IsValidSiteId(value))
        {
            Add(field, "must be 1–64 characters of a–z, 0–9, '-' or '_', starting with a letter or digit");
        }
    }

    public void Id(string field, string value)
    {
        if (!FleetIds.IsValidId(value))
        {
            Add(field, $"must be 1–{MaxIdLength} printable characters");
        }
    }

    public void Finite(string field, double value)
    {
        if (!double.IsFinite(value))
        {
            Add(field, "must be a finite number");
        }
    }

    public void ThrowIfAny()
    {
        if (_items is { Count: > 0 })
        {
            throw GrpcErrors.InvalidArgument(_items);
        }
    }
}

/// <summary>Id rules shared by every service.</summary>
internal static class FleetIds
{
    public static bool IsValidSiteId(string value)
    {
        if (value.Length is 0 or > 64 || !char.IsAsciiLetterOrDigit(value[0]))
        {
            return false;
        }

        foreach (var c in value)
        {
            if (!(char.IsAsciiLetterLower(c) || char.IsAsciiDigit(c) || c == '-' || c == '_'))
            {
                return false;
            }
        }

        return true;
    }

    public static bool IsValidId(string value)
    {
        if (value.Length is 0 or > Violations.MaxIdLength)
        {
            return false;
        }

        foreach (var c in value)
        {
            if (char.IsControl(c))
            {
                return false;
            }
        }

        return true;
    }
}
